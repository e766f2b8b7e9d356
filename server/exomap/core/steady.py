"""Every steady state at an operating point, with its stability.

Method: the steady states at (τ, T_in) are the roots of :math:`T_{in}(\\tau, s) - T_{in} = 0` along one
coordinate s of the steady-state manifold (``exomap.core.manifold``). The coordinate is sampled densely over
every temperature a steady state can have (bounded by the feed's largest adiabatic rise), sign changes are
refined with Brent's method, and every extremum of :math:`T_{in}(s)` between two samples is located too, so
two roots closer together than the sampling (next to a turning point) are not missed. Each root is then
polished by Newton's method on the full species and energy balances of ``exomap.core.model``, and classified
from the eigenvalues of the species+energy Jacobian at fixed volume.

Stability (DESIGN.md §2): ``stable`` when every eigenvalue has a negative real part; ``saddle`` when exactly
one is real and positive (the middle state of a multiplicity); ``unstable`` otherwise. ``oscillatory`` flags
a leading complex pair. Each real part counts by its sign, judged against that eigenvalue's own rounding
error (balanced matrix, condition number from its left and right eigenvectors [3]; the slow eigenvalues from
the Schur complement of the fast variables where a fast reaction makes the matrix stiff); where a real part is
within its error of zero and its sign would change the class, the answer says so and is not a success; so
too where the rounding cannot tell whether the leading eigenvalues are a complex pair (``eigen.oscillation_known``).
The level block is decoupled at constant density (A dh/dt = q_in - q_out(h) with dq_out/dh > 0) and always
stable, so it is left out.

References
----------
[1] C. van Heerden, Autothermic processes, Ind. Eng. Chem. 45 (1953) 1242-1247.
[2] A. Uppal, W. H. Ray, A. B. Poore, On the dynamic behavior of continuous stirred tank reactors,
    Chem. Eng. Sci. 29 (1974) 967-985.
[3] ``exomap.core.eigen`` (eigenvalues with their rounding errors; LAPACK Users' Guide section 4.8).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.optimize import brentq

from exomap.core import valve as valve_mod
from exomap.core.eigen import SADDLE, STABLE, UNSTABLE, classify, eigenvalues_with_errors, oscillation_known
from exomap.core.errors import ModelInputError
from exomap.core.manifold import Manifold
from exomap.core.model import Model, nominal_inputs
from exomap.core.scenario import Scenario, validate

__all__ = ["SADDLE", "STABLE", "UNSTABLE", "SteadyState", "SteadyStateResult", "classify", "steady_states"]
#: Samples along the manifold coordinate for a single operating point (one-reaction closed form, general
#: path where each sample costs an isothermal Newton solve).
POINT_SAMPLES = 3000
POINT_SAMPLES_GENERAL = 1200


@dataclass(frozen=True)
class SteadyState:
    """One steady state. ``sensitivity`` is dT/dT_in at fixed residence time [-]. ``valve_opening`` is the
    inverse characteristic's value [-], which can lie outside 0..1; answers report it through
    ``valve.reported_opening`` and ``valve.opening_status`` (``below_range``, ``above_range``)."""

    T: float
    C: tuple[float, ...]
    conversion: float
    stability: str
    oscillatory: bool
    eigenvalues: tuple[complex, ...]
    valve_opening: float
    sensitivity: float
    residual: float
    species: tuple[str, ...] = field(repr=False, default=())

    @property
    def stable(self) -> bool:
        return self.stability == STABLE

    def to_dict(self) -> dict:
        return {
            "temperature_K": self.T,
            "concentrations_mol_per_m3": dict(zip(self.species, self.C, strict=True)),
            "conversion": self.conversion,
            "stability": self.stability,
            "oscillatory": self.oscillatory,
            "eigenvalues_per_s": [[ev.real, ev.imag] for ev in self.eigenvalues],
            "valve_opening": valve_mod.reported_opening(self.valve_opening),
            "valve_opening_status": valve_mod.opening_status(self.valve_opening),
            "sensitivity": _finite_or_none(self.sensitivity),
        }


@dataclass(frozen=True)
class SteadyStateResult:
    """All steady states at one operating point, sorted by temperature (lowest first)."""

    tau: float
    T_in: float
    q: float
    c_in: tuple[float, ...]
    T_c: float
    V: float
    h: float
    states: tuple[SteadyState, ...]
    success: bool
    message: str
    species: tuple[str, ...]
    samples: int

    def to_dict(self) -> dict:
        return {
            "operating_point": {
                "residence_time_s": self.tau,
                "feed_temperature_K": self.T_in,
                "flow_m3_per_s": self.q,
                "feed_concentrations_mol_per_m3": dict(zip(self.species, self.c_in, strict=True)),
                "coolant_temperature_K": self.T_c,
                "volume_m3": self.V,
                "level_m": self.h,
            },
            "states": [s.to_dict() for s in self.states],
            "success": self.success,
            "message": self.message,
        }


def _finite_or_none(x: float) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def check_point(tau: float, T_in: float) -> None:
    if not (isinstance(tau, (int, float)) and math.isfinite(tau) and tau > 0):
        raise ModelInputError(
            f"residence time must be a positive number of seconds, got {tau!r}", field="residence_time"
        )
    if not (isinstance(T_in, (int, float)) and math.isfinite(T_in) and T_in > 0):
        raise ModelInputError(
            f"feed temperature must be a positive absolute temperature in K, got {T_in!r}", field="feed_temperature"
        )


def roots_along(
    mf: Manifold,
    tau: float,
    T_in: float,
    T_lo: float,
    T_hi: float,
    n: int = POINT_SAMPLES,
    misses: list[str] | None = None,
) -> list[float]:
    """Coordinates s of every root of T_in(tau, s) = T_in, for one tau. A fold pair closer together than one
    sample (next to a cusp) is brought out first (``opmap.unhide_fold_pairs``, as the map does), so the three
    states between its two folds are not reported as one. What may hide a root (samples whose mass balances
    did not converge, a bracket that did not hold) is appended to ``misses``."""
    from exomap.core.opmap import unhide_fold_pairs

    smp = unhide_fold_pairs(mf, mf.sample(np.array([tau]), T_lo, T_hi, n))
    if misses is not None and not np.all(smp.valid[0]):
        misses.append(f"{int(np.count_nonzero(~smp.valid[0]))} sample(s) whose mass balances did not converge")
    return roots_in_samples(mf, tau, T_in, smp.s[0], smp.T_in[0] - T_in, smp.dTin_ds[0], smp.valid[0], misses)


def bracketed_root(fn, a: float, b: float, **kwargs: float) -> float | None:
    """Brent's method on [a, b] only where ``fn`` itself changes sign there (the samples that pointed to the
    interval may come from a different evaluation); None where it does not, or does not converge."""
    fa, fb = fn(a), fn(b)
    if not (math.isfinite(fa) and math.isfinite(fb)):
        return None
    if fa == 0.0:
        return a
    if fb == 0.0:
        return b
    if fa * fb > 0:
        return None
    try:
        return float(brentq(fn, a, b, maxiter=200, **kwargs))
    except (RuntimeError, ValueError):
        return None


def roots_in_samples(
    mf: Manifold,
    tau: float,
    T_in: float,
    s: np.ndarray,
    f: np.ndarray,
    d: np.ndarray,
    valid: np.ndarray,
    misses: list[str] | None = None,
) -> list[float]:
    """Roots of f = T_in(tau, s) - T_in from samples (s, f, d = dT_in/ds) of one column, refined by Brent's
    method; two roots on either side of an extremum between two samples are found too. An interval whose
    sign change does not hold when refined is appended to ``misses`` (never an exception)."""
    ok = valid & np.isfinite(f)

    def phi(x: float) -> float:
        return float(mf.evaluate(np.array([tau]), np.array([x])).T_in[0] - T_in)

    def dphi(x: float) -> float:
        return float(mf.evaluate(np.array([tau]), np.array([x])).dTin_ds[0])

    def miss(k: int) -> None:
        if misses is not None:
            misses.append(f"a root between s = {s[k]:.9g} and {s[k + 1]:.9g} could not be refined")

    roots: list[float] = []
    # only the sample intervals with a sign change of f or of its slope need a closer look
    both = ok[:-1] & ok[1:]
    for k in np.nonzero(both & ((f[:-1] * f[1:] <= 0) | (d[:-1] * d[1:] < 0)))[0]:
        fa, fb = f[k], f[k + 1]
        if fa == 0.0:
            roots.append(float(s[k]))
            continue
        if fb == 0.0:
            continue  # taken as the left end of the next interval (or the last sample below)
        if fa * fb < 0:
            r = bracketed_root(phi, s[k], s[k + 1], xtol=1e-14 * max(abs(s[k]), 1.0), rtol=1e-15)
            if r is None:
                miss(k)
            else:
                roots.append(r)
        elif d[k] * d[k + 1] < 0:
            # an extremum between two samples: two roots may hide on its either side
            se = bracketed_root(dphi, s[k], s[k + 1], xtol=1e-15 * max(abs(s[k]), 1.0), rtol=1e-15)
            if se is None:
                miss(k)
                continue
            fe = phi(se)
            if fe * fa < 0:
                r1 = bracketed_root(phi, s[k], se, rtol=1e-15)
                r2 = bracketed_root(phi, se, s[k + 1], rtol=1e-15)
                if r1 is None or r2 is None:
                    miss(k)
                roots += [r for r in (r1, r2) if r is not None]
            elif fe == 0.0:
                roots.append(se)
    if ok[-1] and f[-1] == 0.0:
        roots.append(float(s[-1]))
    return roots


def steady_states(
    sc: Scenario,
    tau: float,
    T_in: float,
    *,
    c_in: tuple[float, ...] | None = None,
    T_c: float | None = None,
    samples: int | None = None,
) -> SteadyStateResult:
    """Every steady state of the tank at residence time ``tau`` and feed temperature ``T_in``.

    .. math:: 0 = (C_{in} - C)/\\tau + \\nu r(C, T), \\quad
              0 = (T_{in} - T)/\\tau + J \\cdot r - \\kappa (T - T_c) - \\lambda (T - T_{amb}) + p

    Parameters
    ----------
    sc : Scenario
    tau : float
        Residence time V_set / q [s].
    T_in : float
        Feed temperature [K].
    c_in : tuple of float, optional
        Feed concentrations overriding the scenario's [mol/m^3].
    T_c : float, optional
        Coolant temperature overriding the scenario's [K].

    Returns
    -------
    SteadyStateResult
        States sorted by temperature, each with concentrations, conversion, stability, eigenvalues, the
        valve opening that passes the flow at the set level, and dT/dT_in.

    Raises
    ------
    ModelInputError
        For a non-positive or non-finite residence time or feed temperature, or an invalid scenario.

    Notes
    -----
    Completeness rests on the sampling resolving every extremum of T_in(s) that is further than one sample
    from another; the refinement step then catches pairs of roots closer than one sample.

    Examples
    --------
    >>> from exomap.core.scenario import *  # doctest: +SKIP
    """
    validate(sc)
    check_point(tau, T_in)
    mf = Manifold(sc, c_in=c_in, T_c=T_c)
    T_lo, T_hi = mf.temperature_window(T_in, T_in, tau)
    samples = samples or (POINT_SAMPLES if mf.explicit else POINT_SAMPLES_GENERAL)
    misses: list[str] = []
    roots = roots_along(mf, tau, T_in, T_lo, T_hi, samples, misses)
    model = Model(sc)
    q = sc.vessel.V_set / tau
    u = nominal_inputs(sc, tau=tau, T_in=T_in, c_in=tuple(mf.c_in), T_c=mf.T_c)
    opening = valve_mod.opening_for_flow(sc, q)
    # eigenvalues known exactly: -1/tau once per reaction invariant (n - rank(nu)), and once more without jacket
    # and heat loss (T - J . xi is then flushed at 1/tau too)
    # and, as many times, once per species no rate depends on (its column of J is -1/tau on the diagonal only;
    # J + I/tau = [nu; h] [dr/dC, dr/dT] has rank at most the number of the others plus one, with T)
    n_used = int(np.count_nonzero(np.any(sc.orders != 0.0, axis=0)))
    n_exact = max(
        sc.n_species - int(np.linalg.matrix_rank(sc.nu)) + int(mf.kappa + mf.lam == 0.0), sc.n_species - n_used
    )
    states = []
    unresolved: list[float] = []  # temperatures of the states whose stability the rounding hides
    unresolved_osc: list[float] = []  # ... and of those whose oscillatory flag it hides
    for s_root in roots:
        smp = mf.evaluate(np.array([tau]), np.array([s_root]))
        T0 = float(smp.T[0])
        C0 = mf.state_C(smp)[0]
        C, T, res = _polish(model, u, C0, T0)
        y = model.pack(sc.vessel.h_set, C, T, 0.0)
        ev, err, osc_known = _block_eigenvalues(model, y, u, tau, n_exact)
        ev, err = _exact_flushing_modes(ev, err, tau, n_exact)
        order = np.argsort(-ev.real)
        ev, err = ev[order], err[order]
        kind, osc, resolved = classify(ev, err)
        if not resolved:
            unresolved.append(T)
        elif not osc_known:
            unresolved_osc.append(T)
        dT = float(smp.dT_ds[0])
        dTin = float(smp.dTin_ds[0])
        sens = dT / dTin if dTin != 0 else math.inf
        states.append(
            SteadyState(
                T=T,
                C=tuple(float(c) for c in C),
                conversion=float(mf.conversion(np.array(C[mf.key]))),
                stability=kind,
                oscillatory=osc,
                eigenvalues=tuple(complex(e) for e in ev),
                valve_opening=opening,
                sensitivity=sens,
                residual=res,
                species=sc.species,
            )
        )
    states.sort(key=lambda st: st.T)
    converged = bool(states) and all(st.residual < 1e-8 for st in states)
    ok = converged and not unresolved and not unresolved_osc and not misses
    if ok:
        msg = f"{len(states)} steady state(s)"
    elif misses:
        msg = f"{len(states)} steady state(s) found, but the search is incomplete: " + "; ".join(misses)
    elif not states:
        msg = "no steady state converged"
    elif not converged:
        msg = "a steady state did not polish to tolerance"
    else:
        parts = []
        if unresolved:
            parts.append(
                "the stability of the state(s) at "
                + ", ".join(f"{t:.6g} K" for t in sorted(unresolved))
                + (
                    " cannot be resolved: an eigenvalue's real part is within its rounding error of zero (a fast"
                    " reaction next to slow dynamics, or a point on a stability boundary)"
                )
            )
        if unresolved_osc:
            parts.append(
                "whether the state(s) at "
                + ", ".join(f"{t:.6g} K" for t in sorted(unresolved_osc))
                + (
                    " oscillate cannot be resolved: the leading eigenvalues are within their rounding error of"
                    " meeting (the imaginary part of the pair is below its error; a point where a node turns into a"
                    " focus)"
                )
            )
        msg = "; ".join(parts)
    return SteadyStateResult(
        tau=tau,
        T_in=T_in,
        q=q,
        c_in=tuple(float(c) for c in mf.c_in),
        T_c=mf.T_c,
        V=sc.vessel.V_set,
        h=sc.vessel.h_set,
        states=tuple(states),
        success=ok,
        message=msg,
        species=sc.species,
        samples=samples,
    )


def _block_eigenvalues(model: Model, y: np.ndarray, u, tau: float, q: int) -> tuple[np.ndarray, np.ndarray, bool]:
    """Eigenvalues and errors of the species+energy Jacobian J = -(q_in/V) I + K, and whether the rounding decides
    the oscillatory flag. K (the block without the flow term) is built without it, so that a frozen reaction's
    terms of 1e-20 x q_in/V are not rounded away; J's eigenvalues are K's shifted by the exact scalar -q_in/V
    (plus eps |lambda| of error for the shift). Whether two eigenvalues are a complex pair is the same for J and
    K and is judged on K, with K's q eigenvalues known to be 0 (the flushing modes, see
    :func:`_exact_flushing_modes`) set exactly: a frozen reaction leaves every eigenvalue of J at -q_in/V to 15
    digits, where J's own rounding cannot tell a pair from two real eigenvalues."""
    K = model.reactor_block(y, replace(u, q_in=0.0))
    ev, err = eigenvalues_with_errors(K, slow_rate=1.0 / tau)
    ev, err = _exact_flushing_modes(ev, err, math.inf, q)
    known = oscillation_known(ev, err)
    ev = ev - u.q_in / (model.A * y[0])
    return ev, err + np.finfo(float).eps * np.abs(ev), known


def _exact_flushing_modes(ev: np.ndarray, err: np.ndarray, tau: float, q: int) -> tuple[np.ndarray, np.ndarray]:
    """The q eigenvalues -1/tau known exactly (flushing of the reaction invariants, and of T - J . xi when the tank
    exchanges no heat): the q computed ones closest to it, where each lies within its error of it, are set to it
    with no error. A multiple eigenvalue has no individual condition number (its eigenvectors are not unique), so
    the bound of ``eigen`` would call its sign unknown although it is known exactly."""
    if q <= 0 or ev.size == 0:
        return ev, err
    lam = -1.0 / tau  # 0 for tau = inf: the modes of the block without the flow term
    idx = np.argsort(np.abs(ev - lam))[:q]
    ok = np.abs(ev[idx] - lam) <= np.maximum(err[idx], 1e-9 * abs(lam))
    ev, err = ev.copy(), err.copy()
    ev[idx[ok]], err[idx[ok]] = lam, 0.0
    return ev, err


def _polish(model: Model, u, C: np.ndarray, T: float, iterations: int = 4) -> tuple[np.ndarray, float, float]:
    """Newton on the species and energy balances at the set level; returns (C, T, relative residual)."""
    n = model.n
    h = model.sc.vessel.h_set
    z = np.concatenate((C, [T]))
    scale = np.concatenate((np.maximum(np.abs(C), np.max(np.abs(u.c_in)) + 1.0), [T]))

    def residual(zz: np.ndarray) -> np.ndarray:
        y = model.pack(h, zz[:n], zz[n], 0.0)
        return model.rhs(0.0, y, u)[1 : n + 2]

    tau = model.sc.vessel.V_set / u.q_in
    r = residual(z)
    best = (z.copy(), float(np.max(np.abs(r) * tau / scale)))
    for _ in range(iterations):
        y = model.pack(h, z[:n], z[n], 0.0)
        J = model.reactor_block(y, u)
        try:
            dz = np.linalg.solve(J, -r)
        except np.linalg.LinAlgError:
            break
        z = z + dz
        r = residual(z)
        err = float(np.max(np.abs(r) * tau / scale))
        if err < best[1]:
            best = (z.copy(), err)
        if err < 1e-14:
            break
    zb, err = best
    C_out = zb[:n].copy()
    # Newton in linear concentrations resolves them only to about eps x the feed scale: a reactant that a fast
    # reaction keeps at 1e-30 mol/m3 can come out as -3e-30. A negative value that small is rounding (far
    # below what the residual tolerance, 1e-8 of the scale, can see): the start's value, solved in logarithms
    # and positive, is kept there. A negative concentration beyond that is a failed polish, never reported
    # as converged.
    neg = C_out < 0
    if neg.any():
        tiny = neg & (np.abs(C_out) <= 1e-10 * scale[:n])
        C_out[tiny] = np.maximum(C[tiny], 0.0)
        if np.any(C_out < 0):
            err = math.inf
    return C_out, float(zb[n]), err
