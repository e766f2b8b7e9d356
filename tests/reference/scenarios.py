"""Random valid scenarios for the differential check: an exomap scenario document and the same numbers for the
reference solver (``solver.Problem``).

Every number is drawn in SI and written into the document as a bare SI number (DESIGN §3: a bare number is in
SI base units), so exomap and the reference see identical inputs. Ranges (issue 9): 1-3 reactions (single,
A + B -> P, 2A -> D, parallel, series A -> B -> C, series plus 2A -> D, three in series, a product that
decomposes), reactant orders 0.5-2, Ea 30-250 kJ/mol, the feed's largest adiabatic rise 5-400 K, with and
without a jacket, heat loss and agitator power, product in the feed, and now and then a feed without the
first reactant. All data are invented.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .solver import Problem, R, Reaction, Reference

#: Reaction networks: (name, species, [(stoichiometry, reactants)]) with stoichiometry as {species: nu}.
NETWORKS = (
    ("A->P", ("A", "P"), [{"A": -1, "P": 1}]),
    ("A+B->P", ("A", "B", "P"), [{"A": -1, "B": -1, "P": 1}]),
    ("2A->D", ("A", "D"), [{"A": -2, "D": 1}]),
    ("parallel", ("A", "P", "Q"), [{"A": -1, "P": 1}, {"A": -1, "Q": 1}]),
    ("series", ("A", "B", "C"), [{"A": -1, "B": 1}, {"B": -1, "C": 1}]),
    ("series+2A->D", ("A", "B", "C", "D"), [{"A": -1, "B": 1}, {"B": -1, "C": 1}, {"A": -2, "D": 1}]),
    ("series3", ("A", "B", "C", "D"), [{"A": -1, "B": 1}, {"B": -1, "C": 1}, {"C": -1, "D": 1}]),
    ("A+B->P,P->D", ("A", "B", "P", "D"), [{"A": -1, "B": -1, "P": 1}, {"P": -1, "D": 1}]),
    ("parallel+2A->D", ("A", "P", "Q", "D"), [{"A": -1, "P": 1}, {"A": -1, "Q": 1}, {"A": -2, "D": 1}]),
)


@dataclass(frozen=True)
class Case:
    """One random scenario: the document, the reference problem, and its window."""

    seed: int
    network: str
    doc: dict
    problem: Problem
    tau_range: tuple[float, float]
    T_in_range: tuple[float, float]
    tau_nominal: float
    T_in_nominal: float

    def describe(self) -> str:
        pb = self.problem
        bits = [self.network]
        if pb.UA_jacket:
            bits.append("jacket")
        if pb.UA_loss:
            bits.append("heat loss")
        if pb.P_agitator:
            bits.append("agitator")
        return f"seed {self.seed}: " + ", ".join(bits)


def _logu(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _order(rng: np.random.Generator) -> float:
    if rng.random() < 0.5:
        return float(rng.choice([0.5, 1.0, 1.5, 2.0]))
    return float(round(rng.uniform(0.5, 2.0), 3))


def random_case(seed: int) -> Case:
    """The random scenario of one seed (deterministic)."""
    rng = np.random.default_rng(seed)
    name, species, stoich = NETWORKS[int(rng.integers(len(NETWORKS)))]
    rho = float(rng.uniform(700.0, 1400.0))
    cp = float(rng.uniform(1500.0, 4200.0))
    D = float(rng.uniform(0.6, 3.0))
    H = D * float(rng.uniform(1.0, 2.0))
    h_set = H * float(rng.uniform(0.4, 0.85))
    V = math.pi * D**2 / 4.0 * h_set
    tau_nom = _logu(rng, 120.0, 4 * 3600.0)
    T_in_nom = float(rng.uniform(270.0, 420.0))
    # feed: the first reactant, a co-reactant, now and then a product; rarely no first reactant at all
    c_A = _logu(rng, 100.0, 5000.0)
    c_in = dict.fromkeys(species, 0.0)
    c_in["A"] = c_A
    if "B" in species and any(s.get("B", 0) < 0 and s.get("A", 0) < 0 for s in stoich):
        c_in["B"] = c_A * float(rng.uniform(0.5, 2.0))
    if rng.random() < 0.3:
        products = [sp for sp in species if c_in[sp] == 0.0]
        if products:
            c_in[str(rng.choice(products))] = c_A * float(rng.uniform(0.05, 1.0))
    if rng.random() < 0.04:
        c_in["A"] = 0.0
        if all(v == 0.0 for v in c_in.values()):
            c_in[species[-1]] = c_A
    # kinetics: orders, activation energies, rates at a reference temperature relative to the residence time
    T_ref = T_in_nom
    reactions = []
    for j, st in enumerate(stoich):
        orders = {sp: _order(rng) for sp, v in st.items() if v < 0}
        Ea = _logu(rng, 30e3, 250e3)
        Da = _logu(rng, 1e-3, 1e2) if j == 0 else _logu(rng, 1e-3, 1e2)
        total = sum(orders.values())
        k_ref = Da / (tau_nom * c_A ** (total - 1.0))
        k0 = k_ref * math.exp(Ea / (R * T_ref))
        weight = float(rng.uniform(0.2, 1.0))
        if j > 0 and rng.random() < 0.1:
            weight = -float(rng.uniform(0.05, 0.3))  # a mildly endothermic side reaction
        reactions.append({"st": st, "orders": orders, "k0": k0, "Ea": Ea, "w": weight})

    def problem(dH_scale: float, **kw) -> Problem:
        return Problem(
            species=species,
            reactions=tuple(
                Reaction(
                    nu=tuple(float(r["st"].get(sp, 0)) for sp in species),
                    orders=tuple(float(r["orders"].get(sp, 0.0)) for sp in species),
                    k0=r["k0"],
                    Ea=r["Ea"],
                    dH=-r["w"] * dH_scale,
                )
                for r in reactions
            ),
            c_in=tuple(c_in[sp] for sp in species),
            rho=rho,
            cp=cp,
            V=V,
            **kw,
        )

    # scale the reaction enthalpies so that the feed's largest adiabatic rise is the drawn one (5-400 K)
    dT_ad = _logu(rng, 5.0, 400.0)
    rise_per_unit = Reference(problem(1.0)).heat_release_bounds()[0]
    if rise_per_unit <= 0:  # nothing can react (no first reactant): scale by the feed instead
        rise_per_unit = max(c_in.values()) / (rho * cp)
    dH_scale = dT_ad / rise_per_unit
    extras: dict = {}
    doc_extras: dict = {"jacket": None, "heat_loss": None}
    if rng.random() < 0.5:
        beta = _logu(rng, 0.05, 20.0)
        extras["UA_jacket"] = beta * rho * cp * V / tau_nom
        extras["T_c"] = T_in_nom + float(rng.uniform(-60.0, 20.0))
        doc_extras["jacket"] = {"ua": extras["UA_jacket"], "coolant_temperature": extras["T_c"]}
    if rng.random() < 0.3:
        extras["UA_loss"] = _logu(rng, 0.01, 1.0) * rho * cp * V / tau_nom
        extras["T_amb"] = float(rng.uniform(270.0, 310.0))
        doc_extras["heat_loss"] = {"ua": extras["UA_loss"], "ambient_temperature": extras["T_amb"]}
    if rng.random() < 0.3:
        extras["P_agitator"] = _logu(rng, 0.01, 5.0) * rho * cp * V / tau_nom
        doc_extras["agitator_power"] = extras["P_agitator"]
    T_max = T_in_nom + float(rng.uniform(5.0, 1.1 * dT_ad + 30.0))
    pb = problem(dH_scale, T_max=T_max, **extras)
    f = _logu(rng, 3.0, 30.0)
    tau_range = (tau_nom / f, tau_nom * f)
    T_in_range = (max(T_in_nom - float(rng.uniform(10.0, 50.0)), 200.0), T_in_nom + float(rng.uniform(10.0, 50.0)))
    q = V / tau_nom
    doc = {
        "format": "exomap-scenario/1",
        "title": f"random scenario {seed} ({name})",
        "description": "Invented data for the differential check (tests/reference/scenarios.py).",
        "species": list(species),
        "liquid": {"density": rho, "heat_capacity": cp},
        "vessel": {"diameter": D, "height": H, "level_setpoint": h_set, "headspace_pressure": 120000.0},
        "outlet_valve": {
            "kv": max(3600.0 * q * 3.0, 0.01),
            "characteristic": "linear",
            "rangeability": 50,
            "downstream_pressure": 100000.0,
            "drop_below_vessel": 1.5,
            "level_control": {"gain": 1.5, "reset_time": 600.0},
        },
        "reactions": [
            {
                "label": f"r{j + 1}",
                "stoichiometry": {sp: float(v) for sp, v in r["st"].items()},
                "orders": dict(r["orders"]),
                "pre_exponential": r["k0"],
                "activation_energy": r["Ea"],
                "reaction_enthalpy": -r["w"] * dH_scale,
            }
            for j, r in enumerate(reactions)
        ],
        "feed": {"flow": q, "temperature": T_in_nom, "concentrations": {sp: c for sp, c in c_in.items() if c > 0}},
        **doc_extras,
        "limits": {
            "max_temperature": T_max,
            "alarm_temperature": T_max - 5.0,
            "level_high": 0.95 * H,
            "level_low": 0.1 * H,
        },
        "map": {"residence_time": list(tau_range), "feed_temperature": list(T_in_range), "points": [40, 40]},
    }
    return Case(seed, name, doc, pb, tau_range, T_in_range, tau_nom, T_in_nom)


def problem_from_doc(doc: dict) -> Problem:
    """The reference problem of a scenario document whose quantities are bare SI numbers (as the generator
    writes them); read here without exomap."""
    species = tuple(doc["species"])
    v = doc["vessel"]
    jacket, loss = doc.get("jacket"), doc.get("heat_loss")
    return Problem(
        species=species,
        reactions=tuple(
            Reaction(
                nu=tuple(float(r["stoichiometry"].get(sp, 0.0)) for sp in species),
                orders=tuple(float(r["orders"].get(sp, 0.0)) for sp in species),
                k0=float(r["pre_exponential"]),
                Ea=float(r["activation_energy"]),
                dH=float(r["reaction_enthalpy"]),
            )
            for r in doc["reactions"]
        ),
        c_in=tuple(float(doc["feed"]["concentrations"].get(sp, 0.0)) for sp in species),
        rho=float(doc["liquid"]["density"]),
        cp=float(doc["liquid"]["heat_capacity"]),
        V=math.pi * float(v["diameter"]) ** 2 / 4.0 * float(v["level_setpoint"]),
        UA_jacket=float(jacket["ua"]) if jacket else 0.0,
        T_c=float(jacket["coolant_temperature"]) if jacket else 298.15,
        UA_loss=float(loss["ua"]) if loss else 0.0,
        T_amb=float(loss["ambient_temperature"]) if loss else 298.15,
        P_agitator=float(doc.get("agitator_power", 0.0)),
        T_max=float(doc["limits"]["max_temperature"]),
        sensitivity=float((doc.get("check_policy") or {}).get("sensitivity", 3.0)),
    )
