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

The Jacobian of the residuals is not taken by finite differences of replays: each trial replay integrates the
forward sensitivities of the reactor temperature and concentrations with the state (``exomap.core.replay``),
from the analytic derivative of the balances with respect to each target (``_balance_derivative``). One
integration then gives the residuals and their exact Jacobian, free of the integrator noise a difference
quotient amplifies, so the replays can run at a moderate tolerance.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np

from exomap.core.errors import ModelInputError
from exomap.core.fit import FitResult, least_squares_fit
from exomap.core.model import Inputs, Kinetics
from exomap.core.replay import OUTPUT_ROLES, PlantRecord, ReplayResult, replay
from exomap.core.scenario import R_GAS, Scenario

#: Scale dividing each output's residuals (SI): 1 K, 1 cm, 1 % opening, 1 m^3/h.
OUTPUT_SCALES = {"reactor_temperature": 1.0, "level": 0.01, "valve_opening": 0.01, "outlet_flow": 1.0 / 3600.0}
#: Integrator tolerance of the replays inside a fit. The Jacobian comes from the sensitivity equations, not from
#: differences, so the only need is that the sum of squares be accurate well inside the 95 % threshold's rise
#: (about 4 s^2): at 3e-7 the replay of the benchmark's 8 h record agrees with one at 1e-11 to about 1e-5 K.
REPLAY_RTOL = 3e-7
#: Without sensitivities (``calibrate(..., sensitivities=False)``): replays tight enough for difference quotients
#: with a relative step of 1e-4 (about the square root of the replay's relative noise).
DIFFERENCES_RTOL = 1e-8
DIFF_STEP = 1e-4
#: xtol/ftol/gtol of the main fit: parameters to about 1e-10 relative, far inside any standard error.
FIT_TOLERANCE = 1e-8
#: Most model evaluations of one trial replay inside a fit: a trial far from the data (a parameter driven to an
#: extreme by a flat profile) that stiffens the model is a bad fit, not a reason to integrate for minutes.
TRIAL_EVALUATIONS = 20_000
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
            n = len(sc.reactions)
            raise ModelInputError(
                f"the scenario has {n} reaction{'s' if n != 1 else ''} (numbered from 0), no reactions[{j}]", field=path
            )
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


def _balance_derivative(
    sc: Scenario, targets: Sequence[Target], rec: PlantRecord, T_ref: float, scale: np.ndarray
) -> Callable[[np.ndarray, float, float, Inputs, np.ndarray], np.ndarray]:
    """d(dC/dt, dT/dt)/dθ of the scenario ``sc`` (already at the trial values) for the fitted parametrisation
    (ln k for a rate constant), each column multiplied by ``scale`` (so the integrator sees sensitivities of
    one size). A recorded coolant temperature or feed concentration overrides the scenario's: zero column."""
    kin = Kinetics.of(sc)
    rhocp = sc.rho * sc.cp
    n = sc.n_species
    p = len(targets)
    recorded_tc = rec.has("coolant_temperature")
    recorded_c = {s: rec.has(f"feed_concentration.{s}") for s in sc.species}

    def deriv(C: np.ndarray, T: float, V: float, u: Inputs, r: np.ndarray) -> np.ndarray:
        out = np.zeros((n + 1, p))
        for k, t in enumerate(targets):
            col = out[:, k]
            if t.kind in ("rate_constant", "activation_energy"):
                j = t.index
                # r_j = k_ref exp(-E_a/R (1/T - 1/T_ref)) g(C): d r_j/d ln k_ref = r_j
                dr = r[j] if t.kind == "rate_constant" else -r[j] * (1.0 / T - 1.0 / T_ref) / R_GAS
                col[:n] = kin.nu[:, j] * dr
                col[n] = kin.J[j] * dr
            elif t.kind == "reaction_enthalpy":
                col[n] = -r[t.index] / rhocp
            elif t.kind == "jacket.ua":
                col[n] = -(T - u.T_c) / (rhocp * V)
            elif t.kind == "heat_loss.ua":
                col[n] = -(T - u.T_amb) / (rhocp * V)
            elif t.kind == "jacket.coolant_temperature":
                col[n] = 0.0 if recorded_tc else u.UA_jacket / (rhocp * V)
            elif t.kind == "liquid.heat_capacity":
                heat_out = u.UA_jacket * (T - u.T_c) + u.UA_loss * (T - u.T_amb) - u.P_agitator
                col[n] = -float(kin.J @ r) / sc.cp + heat_out / (rhocp * sc.cp * V)
            elif t.kind == "feed_concentration":
                i = sc.species.index(t.species)
                col[i] = 0.0 if recorded_c[t.species] else u.q_in / V
        return out * scale

    return deriv


def calibrate(
    sc: Scenario,
    rec: PlantRecord,
    targets: Sequence[str],
    *,
    T_ref: float | None = None,
    outputs: Sequence[str] = ("reactor_temperature",),
    profile: bool = True,
    deadline: float | None = None,
    sensitivities: bool = True,
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
    deadline : float, optional
        ``time.monotonic()`` past which the profiles stop (their intervals are then not given, with a warning):
        a server passes what is left of its time budget, so the estimates still come back.
    sensitivities : bool
        Jacobian from the sensitivity equations (default). False: finite differences of replays at a tight
        tolerance, the earlier method, kept as the benchmark's baseline and as an independent check.

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

    n_res = sum(int(np.isfinite(rec.series[o]).sum()) for o in outputs)
    # sensitivities of a relative change of each natural parameter (ln k is already relative)
    scale = np.array([1.0 if t.log else (abs(p) if p != 0 else 1.0) for t, p in zip(parsed, p0, strict=True)])
    T_row = sc.n_species  # the temperature's row of the sensitivities
    cache: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}

    def evaluate(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        key = np.asarray(p, dtype=float).tobytes()
        hit = cache.get(key)
        if hit is not None:
            return hit
        try:
            trial = with_values(sc, parsed, natural(p), T_ref)
            with warnings.catch_warnings():
                # a far trial may make LSODA complain before it fails; the failure is what counts (below)
                warnings.simplefilter("ignore", UserWarning)
                res = replay(
                    trial,
                    rec,
                    rtol=REPLAY_RTOL if sensitivities else DIFFERENCES_RTOL,
                    max_evaluations=TRIAL_EVALUATIONS,
                    sensitivity=_balance_derivative(trial, parsed, rec, T_ref, scale) if sensitivities else None,
                    n_params=len(parsed) if sensitivities else 0,
                )
        except (ModelInputError, ArithmeticError, ValueError, RuntimeError):
            # a trial the model cannot follow (no steady state, integrator failure) is a very bad fit, not a crash
            out = (np.full(n_res, 1e6), np.zeros((n_res, len(parsed))))
        else:
            parts, jparts = [], []
            for o in outputs:
                r = res.residuals[o]
                ok = np.isfinite(r)
                parts.append(r[ok] / OUTPUT_SCALES[o])
                if not sensitivities:
                    continue
                if o == "reactor_temperature":
                    jparts.append(res.sensitivity[T_row].T[ok] / scale / OUTPUT_SCALES[o])  # type: ignore[index]
                else:
                    # level, valve and outlet flow do not depend on any target (constant density)
                    jparts.append(np.zeros((int(ok.sum()), len(parsed))))
            out = (np.concatenate(parts), np.concatenate(jparts) if sensitivities else np.zeros((0, 0)))
        if len(cache) > 8:
            cache.pop(next(iter(cache)))
        cache[key] = out
        return out

    fit = least_squares_fit(
        lambda p: evaluate(p)[0],
        p0,
        names=[t.path for t in parsed],
        jac=(lambda p: evaluate(p)[1]) if sensitivities else None,
        bounds=(lower, upper),
        profile=profile,
        max_nfev=200,
        diff_step=None if sensitivities else DIFF_STEP,
        tolerance=FIT_TOLERANCE if sensitivities else 1e-15,
        deadline=deadline,
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
