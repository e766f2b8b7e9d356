"""Calibration: fit chosen scenario parameters to plant data by least squares on the replay.

Targets are scenario paths (DESIGN.md §11, §12):

=====================================  ========================================  ===========================
target                                 what moves                                fitted as
=====================================  ========================================  ===========================
``reactions[i].rate_constant``         k_i at the reference temperature          ln k (so k stays positive)
``reactions[i].activation_energy``     E_a,i with k_i(T_ref) held                E_a [J/mol]
``reactions[i].reaction_enthalpy``     ΔH_i                                      ΔH [J/mol]
``jacket.ua``, ``heat_loss.ua``        UA                                        UA [W/K], >= 0
``jacket.coolant_temperature``         T_c                                       T_c [K]
``liquid.heat_capacity``               c_p                                       c_p [J/(kg K)], > 0
``feed.concentrations.X``              C_X,in                                    C [mol/m^3], >= 0
=====================================  ========================================  ===========================

Arrhenius is written about the reference temperature, :math:`k(T) = k_{ref}\\exp(-E_a/R\\,(1/T - 1/T_{ref}))`,
so a rate constant and an activation energy fitted together are nearly uncorrelated when T_ref lies inside
the data (k0 and E_a fitted directly are correlated to within 1e-6 of ±1 and cannot both be estimated).

The residuals are simulated minus recorded outputs, each divided by its scale (``OUTPUT_SCALES``: 1 K for
temperatures, 1 cm for the level, 1 % for the valve opening, 1 m³/h for the flow), so several outputs can be
fitted together. Statistics and intervals come from ``exomap.core.fit``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from exomap.core.errors import ModelInputError
from exomap.core.fit import FitResult, least_squares_fit
from exomap.core.replay import OUTPUT_ROLES, PlantRecord, ReplayResult, replay
from exomap.core.scenario import R_GAS, Scenario

#: Scale dividing each output's residuals (SI): 1 K, 1 cm, 1 % opening, 1 m^3/h.
OUTPUT_SCALES = {"reactor_temperature": 1.0, "level": 0.01, "valve_opening": 0.01, "outlet_flow": 1.0 / 3600.0}
#: Integrator tolerance of the replays inside a fit: tight, so the sum of squares is smooth in the parameters.
REPLAY_RTOL = 1e-8
#: Most model evaluations of one trial replay inside a fit: a trial far from the data (a parameter driven to an
#: extreme by a flat profile) that stiffens the model is a bad fit, not a reason to integrate for minutes.
TRIAL_EVALUATIONS = 20_000
#: Relative finite-difference step: about the square root of the replay's relative noise.
DIFF_STEP = 1e-4
_TARGET_RE = re.compile(
    r"^(?:reactions\[(?P<j>\d+)\]\.(?P<rxn>rate_constant|activation_energy|reaction_enthalpy)"
    r"|(?P<plain>jacket\.ua|heat_loss\.ua|jacket\.coolant_temperature|liquid\.heat_capacity)"
    r"|feed\.concentrations\.(?P<species>[^\s.\[\]]+))$"
)
TARGETS_HELP = (
    "reactions[i].rate_constant, reactions[i].activation_energy, reactions[i].reaction_enthalpy, jacket.ua, "
    "heat_loss.ua, jacket.coolant_temperature, liquid.heat_capacity, feed.concentrations.X"
)


@dataclass(frozen=True)
class Target:
    """One fitted parameter: its scenario path and how it is parametrised."""

    path: str
    kind: str
    index: int | None = None
    species: str | None = None

    @property
    def log(self) -> bool:
        return self.kind == "rate_constant"


def parse_target(path: str, sc: Scenario) -> Target:
    """A target path checked against the scenario; ``ModelInputError`` naming it otherwise."""
    m = _TARGET_RE.match(path.strip())
    if not m:
        raise ModelInputError(f"{path!r} is not a calibration target; one of {TARGETS_HELP}", field="fit")
    if m.group("rxn"):
        j = int(m.group("j"))
        if j >= len(sc.reactions):
            raise ModelInputError(f"the scenario has {len(sc.reactions)} reactions, not {j + 1}", field=path)
        return Target(path, m.group("rxn"), index=j)
    if m.group("species"):
        s = m.group("species")
        if s not in sc.species:
            raise ModelInputError(f"unknown species {s!r}; species: {', '.join(sc.species)}", field=path)
        return Target(path, "feed_concentration", species=s)
    plain = m.group("plain")
    if plain == "jacket.ua" and sc.UA_jacket <= 0:
        raise ModelInputError("the scenario has no jacket to fit", field=path)
    return Target(path, plain)


def rate_constant(sc: Scenario, j: int, T_ref: float) -> float:
    """k_j(T_ref) [SI units of the reaction's k0]."""
    r = sc.reactions[j]
    return r.k0 * math.exp(-r.Ea / (R_GAS * T_ref))


def value_of(sc: Scenario, t: Target, T_ref: float) -> float:
    """The target's current value in SI (k at T_ref for a rate constant)."""
    if t.kind == "rate_constant":
        return rate_constant(sc, t.index, T_ref)  # type: ignore[arg-type]
    if t.kind == "activation_energy":
        return sc.reactions[t.index].Ea  # type: ignore[index]
    if t.kind == "reaction_enthalpy":
        return sc.reactions[t.index].dH  # type: ignore[index]
    if t.kind == "feed_concentration":
        return sc.c_in[sc.species.index(t.species)]  # type: ignore[arg-type]
    return {
        "jacket.ua": sc.UA_jacket,
        "heat_loss.ua": sc.UA_loss,
        "jacket.coolant_temperature": sc.T_c,
        "liquid.heat_capacity": sc.cp,
    }[t.kind]


def with_values(sc: Scenario, targets: Sequence[Target], values: Sequence[float], T_ref: float) -> Scenario:
    """A copy of the scenario with the targets set to ``values`` (SI; k at T_ref for a rate constant).

    Changing an activation energy holds k(T_ref): k0 follows. Rate constants are applied after activation
    energies, so both can be set together.
    """
    reactions = list(sc.reactions)
    changes: dict[str, object] = {}
    c_in = list(sc.c_in)
    order = sorted(range(len(targets)), key=lambda k: targets[k].kind == "rate_constant")
    for k in order:
        t, v = targets[k], float(values[k])
        if t.kind == "activation_energy":
            r = reactions[t.index]  # type: ignore[index]
            k_ref = r.k0 * math.exp(-r.Ea / (R_GAS * T_ref))
            reactions[t.index] = replace(r, Ea=v, k0=k_ref * math.exp(v / (R_GAS * T_ref)))  # type: ignore[index]
        elif t.kind == "rate_constant":
            r = reactions[t.index]  # type: ignore[index]
            reactions[t.index] = replace(r, k0=v * math.exp(r.Ea / (R_GAS * T_ref)))  # type: ignore[index]
        elif t.kind == "reaction_enthalpy":
            reactions[t.index] = replace(reactions[t.index], dH=v)  # type: ignore[index]
        elif t.kind == "feed_concentration":
            c_in[sc.species.index(t.species)] = v  # type: ignore[arg-type]
        else:
            attr = {"jacket.ua": "UA_jacket", "heat_loss.ua": "UA_loss", "jacket.coolant_temperature": "T_c",
                    "liquid.heat_capacity": "cp"}[t.kind]  # fmt: skip
            changes[attr] = v
    return replace(sc, reactions=tuple(reactions), c_in=tuple(c_in), **changes)  # type: ignore[arg-type]


@dataclass(frozen=True, eq=False)
class CalibrationResult:
    """Fitted targets with their uncertainty, the fitted scenario and the replay at the fit.

    ``estimates`` are in SI in the target's own terms (k at T_ref for a rate constant); ``fit`` holds the
    raw fit in the fitted parametrisation (ln k for rate constants).
    """

    targets: tuple[Target, ...]
    T_ref: float
    outputs: tuple[str, ...]
    estimates: np.ndarray
    standard_errors: np.ndarray
    interval_95: tuple[tuple[float | None, float | None], ...]
    initial: np.ndarray
    fit: FitResult
    scenario: Scenario
    replay: ReplayResult
    residual_sd: dict[str, float]

    @property
    def success(self) -> bool:
        return self.fit.success

    def to_dict(self) -> dict:
        return {
            "reference_temperature_K": self.T_ref,
            "outputs": list(self.outputs),
            "estimates": [
                {
                    "target": t.path,
                    "value": float(v),
                    "initial": float(v0),
                    "standard_error": float(s),
                    "interval_95": [None if lo is None else float(lo), None if hi is None else float(hi)],
                    "unit": _unit(t),
                }
                for t, v, v0, s, (lo, hi) in zip(
                    self.targets, self.estimates, self.initial, self.standard_errors, self.interval_95, strict=True
                )
            ],
            "correlations": [
                [None if not math.isfinite(c) else c for c in row] for row in self.fit.correlations.tolist()
            ],
            "residual_sd": self.residual_sd,
            "observations": self.fit.n_obs,
            "degrees_of_freedom": self.fit.dof,
            "warnings": list(self.fit.warnings),
            "success": self.fit.success,
            "message": self.fit.message,
        }


def _unit(t: Target) -> str:
    return {
        "rate_constant": "SI units of the reaction's k0, (mol/m^3)^(1-n)/s",
        "activation_energy": "J/mol",
        "reaction_enthalpy": "J/mol",
        "feed_concentration": "mol/m^3",
        "jacket.ua": "W/K",
        "heat_loss.ua": "W/K",
        "jacket.coolant_temperature": "K",
        "liquid.heat_capacity": "J/(kg K)",
    }[t.kind]


def calibrate(
    sc: Scenario,
    rec: PlantRecord,
    targets: Sequence[str],
    *,
    T_ref: float | None = None,
    outputs: Sequence[str] = ("reactor_temperature",),
    profile: bool = True,
) -> CalibrationResult:
    """Fit ``targets`` so the replay of ``rec`` matches its recorded ``outputs``.

    Parameters
    ----------
    sc : Scenario
        The starting scenario (its values are the starting guesses).
    rec : PlantRecord
        Plant data with the recorded inputs and outputs.
    targets : sequence of str
        Target paths (see the module table); at least one, none twice.
    T_ref : float, optional
        Reference temperature of rate constants [K]; default the mean recorded reactor temperature.
    outputs : sequence of str
        Recorded outputs to fit (``OUTPUT_ROLES``).
    profile : bool
        Profile-likelihood intervals (default) or linearised ones.

    Returns
    -------
    CalibrationResult

    Raises
    ------
    ModelInputError
        Unknown or repeated target, an output that is not recorded, too few records.
    """
    if not targets:
        raise ModelInputError("name at least one target to fit", field="fit")
    parsed = [parse_target(p, sc) for p in targets]
    if len({t.path for t in parsed}) != len(parsed):
        raise ModelInputError("a target is named twice", field="fit")
    for o in outputs:
        if o not in OUTPUT_ROLES:
            raise ModelInputError(f"unknown output {o!r}; one of {', '.join(OUTPUT_ROLES)}", field="outputs")
        if not rec.has(o):
            raise ModelInputError(f"the data have no recorded {o.replace('_', ' ')}", field="outputs")
    if T_ref is None:
        T_rec = rec.series.get("reactor_temperature")
        T_ref = float(np.nanmean(T_rec)) if T_rec is not None and np.isfinite(T_rec).any() else sc.T_in
    v0 = np.array([value_of(sc, t, T_ref) for t in parsed])
    if any(t.log and not v > 0 for t, v in zip(parsed, v0, strict=True)):
        raise ModelInputError("a rate constant must start positive", field="fit")
    p0 = np.array([math.log(v) if t.log else v for t, v in zip(parsed, v0, strict=True)])
    lower = np.array(
        [-np.inf if t.log or t.kind in ("reaction_enthalpy", "jacket.coolant_temperature") else 0.0 for t in parsed]
    )
    upper = np.full(p0.size, np.inf)

    def natural(p: np.ndarray) -> np.ndarray:
        return np.array([math.exp(x) if t.log else x for t, x in zip(parsed, p, strict=True)])

    def residuals(p: np.ndarray) -> np.ndarray:
        try:
            trial = with_values(sc, parsed, natural(p), T_ref)
            res = replay(trial, rec, rtol=REPLAY_RTOL, max_evaluations=TRIAL_EVALUATIONS)
        except (ModelInputError, ArithmeticError, ValueError, RuntimeError):
            # a trial the model cannot follow (no steady state, integrator failure) is a very bad fit, not a crash
            return np.full(sum(int(np.isfinite(rec.series[o]).sum()) for o in outputs), 1e6)
        parts = []
        for o in outputs:
            r = res.residuals[o]
            parts.append(r[np.isfinite(r)] / OUTPUT_SCALES[o])
        return np.concatenate(parts)

    fit = least_squares_fit(
        residuals,
        p0,
        names=[t.path for t in parsed],
        bounds=(lower, upper),
        profile=profile,
        max_nfev=200,
        diff_step=DIFF_STEP,
    )
    est = natural(fit.estimates)
    se = np.array([v * s if t.log else s for t, v, s in zip(parsed, est, fit.standard_errors, strict=True)])
    intervals = tuple(
        (
            None if lo is None else (math.exp(lo) if t.log else lo),
            None if hi is None else (math.exp(hi) if t.log else hi),
        )
        for t, (lo, hi) in zip(parsed, fit.interval_95, strict=True)
    )
    fitted = with_values(sc, parsed, est, T_ref)
    final = replay(fitted, rec, rtol=REPLAY_RTOL)
    sd = {o: float(np.nanstd(final.residuals[o], ddof=len(parsed))) for o in outputs}
    return CalibrationResult(
        targets=tuple(parsed),
        T_ref=float(T_ref),
        outputs=tuple(outputs),
        estimates=est,
        standard_errors=se,
        interval_95=intervals,
        initial=v0,
        fit=fit,
        scenario=fitted,
        replay=final,
        residual_sd=sd,
    )
