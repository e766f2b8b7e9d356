"""Replay of plant data: the scenario driven by recorded inputs, beside the recorded outputs.

A historian record gives the inputs the plant saw (feed flow, feed temperature, coolant temperature, feed
concentrations) and what the tank did (reactor temperature, level, valve opening, outlet flow). ``replay``
integrates the full model of ``exomap.core.model`` with the recorded inputs, interpolated linearly between
records (a missing input keeps the scenario's own value), from the steady state consistent with the first
record, and returns the simulated outputs at the record times with the residuals against the recorded ones.

Notes
-----
* Start: the steady state at the first record's operating point (residence time from the feed flow at the set
  level, feed temperature, coolant temperature, feed concentrations). Where that point has several steady
  states, the one nearest the first recorded reactor temperature is taken (the low one without a record).
  The level starts at its setpoint, the valve at the opening that passes the first feed flow there.
* Integration: LSODA with the model's analytic Jacobian, evaluated at the record times; inputs are piecewise
  linear in time, so the integrator steps across each record's kink.
* A record whose recorded output is missing (NaN) has no residual for that output.
* Sensitivities (for calibration): given the derivative of the species and energy balances with respect to
  some parameters, ``replay`` also integrates the forward sensitivities S = d(C, T)/dθ with the state,

  .. math::

      \\dot S = A(t)\\,S + \\partial f/\\partial\\theta, \\qquad S(0) = -A_0^{-1}\\,\\partial f/\\partial\\theta|_0

  where A is the Jacobian of the species+energy block (``Model.reactor_block``) and S(0) follows from the
  starting steady state by the implicit function theorem [1]. The level block does not depend on the
  parameters a calibration moves (constant density: the level sees only the flows), so its sensitivities are
  zero and are not carried. The Newton matrix given to the integrator is block-diagonal (A for each column of
  S, the second derivatives left out), as in the simultaneous corrector of [2]; error control covers S too.

References
----------
[1] D. M. Bates, D. G. Watts, Nonlinear Regression Analysis and Its Applications, Wiley (1988), §5.4
    (sensitivity equations of ODE models).
[2] T. Maly, L. R. Petzold, Numerical methods and software for sensitivity analysis of differential-algebraic
    systems, Applied Numerical Mathematics 20 (1996) 57-79.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import solve_ivp

from exomap.core import valve as valve_mod
from exomap.core.errors import ConvergenceError, ModelInputError
from exomap.core.model import Inputs, Kinetics, Model, nominal_inputs
from exomap.core.scenario import R_GAS, Scenario, validate

#: Recorded inputs the replay drives the model with (``feed_concentration.X`` for each species X as well).
INPUT_ROLES = ("feed_flow", "feed_temperature", "coolant_temperature")
#: Recorded outputs the replay is compared with.
OUTPUT_ROLES = ("reactor_temperature", "level", "valve_opening", "outlet_flow")
#: Most model evaluations one replay may use [-].
MAX_RHS_EVALUATIONS = 400_000


@dataclass(frozen=True)
class PlantRecord:
    """Plant data in SI for the core: record times and the series of each role.

    Attributes
    ----------
    t : ndarray
        Record times from the first record [s], increasing.
    series : dict of str to ndarray
        Role -> values at ``t`` in SI (m^3/s, K, mol/m^3, m, [-]); NaN where a value is missing or was flagged
        bad. Roles: ``INPUT_ROLES``, ``feed_concentration.X``, ``OUTPUT_ROLES``.
    """

    t: np.ndarray
    series: Mapping[str, np.ndarray]

    def has(self, role: str) -> bool:
        v = self.series.get(role)
        return v is not None and bool(np.isfinite(v).any())


@dataclass(frozen=True, eq=False)
class ReplayResult:
    """Simulated outputs at the record times, beside the recorded ones.

    Attributes
    ----------
    t : ndarray  record times [s]
    T, h, q_out, opening : ndarray  simulated temperature [K], level [m], outlet flow [m^3/s], valve opening [-]
    C : ndarray  simulated concentrations (n_species, n_records) [mol/m^3]
    tau, T_in : ndarray  residence time V_set/q_in [s] and feed temperature [K] of the record (the plant's path)
    residuals : dict  role -> simulated minus recorded, NaN where not recorded
    start_T : float  temperature of the starting steady state [K]
    success, message
    stats : dict  solver statistics
    """

    t: np.ndarray
    T: np.ndarray
    h: np.ndarray
    C: np.ndarray
    q_out: np.ndarray
    opening: np.ndarray
    tau: np.ndarray
    T_in: np.ndarray
    recorded: Mapping[str, np.ndarray]
    residuals: Mapping[str, np.ndarray]
    start_T: float
    species: tuple[str, ...]
    success: bool
    message: str
    stats: dict = field(default_factory=dict)
    #: d(C_1..C_n, T)/dθ at the record times, shape (n_species + 1, n_params, n_records), when asked for
    sensitivity: np.ndarray | None = None

    def residual_statistics(self) -> dict[str, dict[str, float | int | None]]:
        """Per recorded output: count, mean, standard deviation, RMS and largest absolute residual (SI)."""
        out: dict[str, dict[str, float | int | None]] = {}
        for role, r in self.residuals.items():
            ok = r[np.isfinite(r)]
            if ok.size == 0:
                continue
            out[role] = {
                "count": int(ok.size),
                "mean": float(ok.mean()),
                "sd": float(ok.std(ddof=1)) if ok.size > 1 else None,
                "rms": float(math.sqrt(float(np.mean(ok * ok)))),
                "max_abs": float(np.max(np.abs(ok))),
            }
        return out

    def to_dict(self) -> dict:
        def clean(a: np.ndarray) -> list:
            a = np.asarray(a, dtype=float)
            return [None if not math.isfinite(v) else v for v in a.tolist()]

        return {
            "time_s": self.t.tolist(),
            "simulated": {
                "temperature_K": clean(self.T),
                "level_m": clean(self.h),
                "outlet_flow_m3_per_s": clean(self.q_out),
                "valve_opening": clean(self.opening),
                "concentrations_mol_per_m3": {s: clean(self.C[i]) for i, s in enumerate(self.species)},
            },
            "recorded": {_KEYS[k]: clean(v) for k, v in self.recorded.items() if k in _KEYS},
            "path": {"residence_time_s": clean(self.tau), "feed_temperature_K": clean(self.T_in)},
            "residuals": {_KEYS[k]: clean(v) for k, v in self.residuals.items()},
            "residual_statistics": {_KEYS[k]: v for k, v in self.residual_statistics().items()},
            "start_temperature_K": self.start_T,
            "success": self.success,
            "message": self.message,
        }


#: Output role -> answer key (unit in the name).
_KEYS = {
    "reactor_temperature": "reactor_temperature_K",
    "level": "level_m",
    "valve_opening": "valve_opening",
    "outlet_flow": "outlet_flow_m3_per_s",
}


class _Drive:
    """Recorded inputs as piecewise-linear functions of time (scenario values where a role is not recorded)."""

    def __init__(self, sc: Scenario, rec: PlantRecord) -> None:
        t = rec.t
        self.t = t

        def series(role: str, default: float) -> np.ndarray:
            v = rec.series.get(role)
            if v is None or not np.isfinite(v).any():
                return np.full(t.size, default)
            ok = np.isfinite(v)
            # fill gaps by interpolating across them (a historian's gap is not a step to the default)
            return np.interp(t, t[ok], v[ok])

        self.q = series("feed_flow", sc.q_in)
        self.T_in = series("feed_temperature", sc.T_in)
        self.T_c = series("coolant_temperature", sc.T_c)
        self.c = np.array([series(f"feed_concentration.{s}", c) for s, c in zip(sc.species, sc.c_in, strict=True)])
        if np.any(self.q <= 0):
            raise ModelInputError("the recorded feed flow must be positive", field="feed_flow")
        self._ts = t.tolist()
        self._rows = np.vstack([self.q, self.T_in, self.T_c, self.c]).T.tolist()

    def at(self, t: float) -> tuple[float, float, float, list[float]]:
        # plain floats and bisect: this runs once per model evaluation, where numpy's call cost dominates
        ts = self._ts
        k = bisect.bisect_right(ts, t) - 1
        if k < 0:
            k, w = 0, 0.0
        elif k >= len(ts) - 1:
            k, w = len(ts) - 2, 1.0
        else:
            w = (t - ts[k]) / (ts[k + 1] - ts[k])
        rows = self._rows
        a, b = rows[k], rows[k + 1]
        v = [x + w * (y - x) for x, y in zip(a, b, strict=True)]
        return v[0], v[1], v[2], v[3:]


def _start_state(sc: Scenario, drive: _Drive, rec: PlantRecord) -> tuple[np.ndarray, float]:
    from exomap.core.steady import steady_states

    q0, T_in0, T_c0, c0 = drive.at(float(drive.t[0]))
    tau0 = sc.vessel.V_set / q0
    res = steady_states(sc, tau0, T_in0, c_in=tuple(float(v) for v in c0), T_c=T_c0)
    states = [s for s in res.states]
    if not states:
        raise ConvergenceError(f"no steady state found at the first record: {res.message}")
    T_rec = rec.series.get("reactor_temperature")
    if T_rec is not None and np.isfinite(T_rec[0]):
        st = min(states, key=lambda s: abs(s.T - float(T_rec[0])))
    else:
        stable = [s for s in states if s.stable] or states
        st = stable[0]
    return np.asarray(st.C, dtype=float), float(st.T)


def _openings(sc: Scenario, base: Inputs, h: np.ndarray, I: np.ndarray) -> np.ndarray:
    """Valve opening along the run: fixed, or the PI law clamped to 0..1 (``Model.opening``, vectorised)."""
    if base.opening is not None:
        return np.full(h.shape, float(np.clip(base.opening, 0.0, 1.0)))
    Kc = sc.valve.gain or 0.0
    Ti = sc.valve.reset_time or 1.0
    return np.clip(base.bias + Kc * (h - base.h_set + I / Ti), 0.0, 1.0)


def _flows(sc: Scenario, h: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Outlet flow along the run (``valve.flow``, vectorised)."""
    dp = sc.vessel.p_head + sc.rho * valve_mod.G * (h + sc.valve.z_drop) - sc.valve.p_down
    f = np.asarray(valve_mod.characteristic(x, sc.valve.characteristic, sc.valve.rangeability), dtype=float)
    q = sc.valve.Kv / 3600.0 * f * np.sqrt(np.maximum(dp, 0.0) / 1e5 / (sc.rho / valve_mod.RHO0))
    return np.where((dp > 0) & (x > 0), q, 0.0)


#: d(species and energy balances)/dθ at (C, T, V, inputs, rates): shape (n_species + 1, n_params)
ParameterDerivative = Callable[[np.ndarray, float, float, Inputs, np.ndarray], np.ndarray]


def _rate_derivatives(kin: Kinetics, C: np.ndarray, T: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``Kinetics.rates_and_derivatives`` with the power law's dr_j/dC_i = n_ij r_j / C_i where every
    concentration is positive (one vectorised line instead of a loop over species); the general routine
    otherwise."""
    if np.all(C > 0.0):
        r = kin.rates(C, T)
        return r, kin.orders * (r[:, None] / C[None, :]), r * kin.Ea / (R_GAS * T * T)
    return kin.rates_and_derivatives(C, T)


def replay(
    sc: Scenario,
    rec: PlantRecord,
    *,
    rtol: float = 1e-6,
    max_evaluations: int = MAX_RHS_EVALUATIONS,
    sensitivity: ParameterDerivative | None = None,
    n_params: int = 0,
) -> ReplayResult:
    """Drive the scenario with recorded inputs and compare with the recorded outputs.

    Parameters
    ----------
    sc : Scenario
    rec : PlantRecord
        At least two records; times increasing.
    rtol : float
        Relative tolerance of the integrator [-].
    max_evaluations : int
        Most model evaluations before the replay is abandoned with a ``ConvergenceError`` [-].
    sensitivity : callable, optional
        ``f(C, T, V, inputs, rates) -> (n_species + 1, n_params)``: the derivative of the species and energy balances
        (dC/dt, dT/dt) with respect to ``n_params`` parameters. When given, the forward sensitivities are
        integrated with the state and returned as ``ReplayResult.sensitivity``.
    n_params : int
        Number of parameters of ``sensitivity``.

    Returns
    -------
    ReplayResult

    Raises
    ------
    ModelInputError
        Fewer than two records, times not increasing, a non-positive feed flow.
    ConvergenceError
        No steady state at the first record, or the integrator failed.
    """
    validate(sc)
    t = np.asarray(rec.t, dtype=float)
    if t.size < 2:
        raise ModelInputError("a replay needs at least two records", field="time")
    if not np.all(np.diff(t) > 0):
        raise ModelInputError("record times must increase", field="time")
    drive = _Drive(sc, rec)
    model = Model(sc)
    C0, T0 = _start_state(sc, drive, rec)
    q0, T_in0, T_c0, c0 = drive.at(float(t[0]))
    base = nominal_inputs(sc, tau=sc.vessel.V_set / q0, T_in=T_in0, c_in=tuple(c0), T_c=T_c0)
    y0 = model.pack(sc.vessel.h_set, C0, T0, 0.0)
    nfev = 0

    def inputs(tt: float) -> Inputs:
        q, T_in, T_c, c = drive.at(tt)
        return Inputs(
            q_in=q,
            T_in=T_in,
            c_in=tuple(c),
            T_c=T_c,
            UA_jacket=base.UA_jacket,
            UA_loss=base.UA_loss,
            T_amb=base.T_amb,
            P_agitator=base.P_agitator,
            opening=base.opening,
            bias=base.bias,
            h_set=base.h_set,
        )

    def rhs(tt: float, y: np.ndarray) -> np.ndarray:
        nonlocal nfev
        nfev += 1
        if nfev > max_evaluations:
            raise ConvergenceError(f"the replay needed more than {max_evaluations} model evaluations")
        return model.rhs(tt, y, inputs(tt))

    def jac(tt: float, y: np.ndarray) -> np.ndarray:
        return model.jacobian(tt, y, inputs(tt))

    n = sc.n_species
    N = y0.size
    blk = slice(1, 2 + n)  # C_1..C_n, T
    if sensitivity is not None and n_params > 0:
        p = n_params
        u0 = inputs(float(t[0]))
        A0 = model.jacobian(float(t[0]), y0, u0)[blk, blk]
        V0 = sc.vessel.area * sc.vessel.h_set
        try:
            S0 = -np.linalg.solve(A0, sensitivity(C0, T0, V0, u0, model.kin.rates(C0, T0)))
        except np.linalg.LinAlgError:
            raise ConvergenceError("the starting steady state is singular: its sensitivities are undefined") from None
        eye = np.eye(p)
        kin, nu, Jh = model.kin, model.kin.nu, model.kin.J
        rhocp = model.rhocp
        eye_n = np.eye(n)

        def rhs_aug(tt: float, ya: np.ndarray) -> np.ndarray:
            nonlocal nfev
            nfev += 1
            if nfev > max_evaluations:
                raise ConvergenceError(f"the replay needed more than {max_evaluations} model evaluations")
            y = ya[:N]
            u = inputs(tt)
            C, T = y[1 : 1 + n], float(y[1 + n])
            V = sc.vessel.area * max(float(y[0]), 1e-12)
            r, dr_dC, dr_dT = _rate_derivatives(kin, C, T)
            # the species+energy block of Model.jacobian, from the same rates
            A = np.empty((n + 1, n + 1))
            A[:n, :n] = nu @ dr_dC - (u.q_in / V) * eye_n
            A[:n, n] = nu @ dr_dT
            A[n, :n] = Jh @ dr_dC
            A[n, n] = -u.q_in / V + Jh @ dr_dT - (u.UA_jacket + u.UA_loss) / (rhocp * V)
            S = ya[N:].reshape(n + 1, p)
            dS = A @ S + sensitivity(C, T, V, u, r)
            return np.concatenate((model.rhs(tt, y, u, r), dS.ravel()))

        def jac_aug(tt: float, ya: np.ndarray) -> np.ndarray:
            y = ya[:N]
            Jm = model.jacobian(tt, y, inputs(tt))
            out = np.zeros((N + (n + 1) * p,) * 2)
            out[:N, :N] = Jm
            out[N:, N:] = np.kron(Jm[blk, blk], eye)
            return out

        ya0 = np.concatenate((y0, S0.ravel()))
        sol = solve_ivp(
            rhs_aug, (float(t[0]), float(t[-1])), ya0, method="LSODA", t_eval=t, jac=jac_aug, rtol=rtol, atol=1e-9
        )
    else:
        sol = solve_ivp(rhs, (float(t[0]), float(t[-1])), y0, method="LSODA", t_eval=t, jac=jac, rtol=rtol, atol=1e-9)
    if sol.status < 0 or sol.y.shape[1] != t.size:
        raise ConvergenceError(f"the replay could not be integrated: {sol.message}")
    sens = sol.y[N:].reshape(n + 1, n_params, t.size) if sensitivity is not None and n_params > 0 else None
    Y = sol.y[:N]
    h, C, T = Y[0], Y[1 : 1 + n], Y[1 + n]
    x = _openings(sc, base, h, Y[2 + n])
    q_out = _flows(sc, h, x)
    simulated = {"reactor_temperature": T, "level": h, "valve_opening": x, "outlet_flow": q_out}
    recorded = {r: np.asarray(rec.series[r], dtype=float) for r in OUTPUT_ROLES if rec.has(r)}
    residuals = {r: simulated[r] - v for r, v in recorded.items()}
    return ReplayResult(
        t=t - t[0],
        T=T,
        h=h,
        C=C,
        q_out=q_out,
        opening=x,
        tau=sc.vessel.V_set / drive.q,
        T_in=drive.T_in,
        recorded=recorded,
        residuals=residuals,
        start_T=T0,
        species=sc.species,
        success=True,
        message=f"{t.size} records replayed, {nfev} model evaluations",
        stats={"nfev": nfev, "njev": int(sol.njev), "nlu": int(sol.nlu)},
        sensitivity=sens,
    )
