"""Nonlinear least squares with the statistics a reviewer needs: standard errors, correlations, profile
likelihood intervals and identifiability warnings.

.. math::

    \\hat\\theta = \\arg\\min_\\theta S(\\theta), \\qquad S(\\theta) = \\sum_k r_k(\\theta)^2

Standard errors come from the linearisation at the optimum, :math:`\\mathrm{Cov} = s^2 (J^T J)^{-1}` with
:math:`s^2 = S(\\hat\\theta)/(n - p)` [1]. The 95 % interval of one parameter is the set of values whose
*profile* sum of squares (the others re-optimised) stays below

.. math::

    S(\\hat\\theta) \\left(1 + \\frac{F_{0.95}(1, n-p)}{n-p}\\right)

(the likelihood-ratio interval of [1], §6.1), which follows the real shape of the sum of squares where the
linear interval would not (a parameter the data barely determine gets a long or open interval, not a
misleadingly short one).

Notes
-----
A parameter is reported *not identifiable* when its profile stays under the threshold out to the search
limit (flat profile; the interval is open on that side and given as None) or when its correlation with another
estimate exceeds ``CORRELATION_WARNING`` in magnitude.

References
----------
[1] D. M. Bates, D. G. Watts, Nonlinear Regression Analysis and Its Applications, Wiley (1988), ch. 2 and 6.
[2] NIST/ITL Statistical Reference Datasets (StRD), nonlinear regression, https://www.itl.nist.gov/div898/strd/
    (the tests check this module against their certified values).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import stats
from scipy.optimize import least_squares

from exomap.core.errors import ConvergenceError, ModelInputError

#: Correlation of two estimates beyond which the data cannot tell them apart [-].
CORRELATION_WARNING = 0.99
#: Profile search: largest distance from the estimate, in standard errors.
PROFILE_MAX_SE = 50.0
#: Most residual evaluations all the profiles of one fit may use, per parameter; past it the sides not yet
#: found are reported open, with a warning (a profile that needs more is flat or the model is stiff there).
PROFILE_EVALUATIONS = 150


@dataclass(frozen=True)
class FitResult:
    """A least-squares fit. Arrays follow ``names``.

    Attributes
    ----------
    names : tuple of str
    estimates, standard_errors : ndarray
        Estimates and their linearised standard errors (in the fitted parametrisation).
    covariance, correlations : ndarray, shape (p, p)
    interval_95 : tuple of (float or None, float or None)
        Profile-likelihood 95 % interval of each parameter; None where the profile stays flat (open side).
    ssr, residual_sd : float
        Residual sum of squares and s = sqrt(ssr/(n - p)).
    n_obs, dof : int
    warnings : tuple of str
    success : bool
    message : str
    nfev : int
        Residual evaluations, profiles included.
    """

    names: tuple[str, ...]
    estimates: np.ndarray
    standard_errors: np.ndarray
    covariance: np.ndarray
    correlations: np.ndarray
    interval_95: tuple[tuple[float | None, float | None], ...]
    ssr: float
    residual_sd: float
    n_obs: int
    dof: int
    warnings: tuple[str, ...]
    success: bool
    message: str
    nfev: int = 0
    residuals: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def to_dict(self) -> dict:
        return {
            "estimates": [
                {
                    "name": n,
                    "value": float(v),
                    "standard_error": float(s),
                    "interval_95": [None if lo is None else float(lo), None if hi is None else float(hi)],
                }
                for n, v, s, (lo, hi) in zip(
                    self.names, self.estimates, self.standard_errors, self.interval_95, strict=True
                )
            ],
            "correlations": self.correlations.tolist(),
            "residual_sum_of_squares": self.ssr,
            "residual_sd": self.residual_sd,
            "observations": self.n_obs,
            "degrees_of_freedom": self.dof,
            "warnings": list(self.warnings),
            "success": self.success,
            "message": self.message,
        }


def _jacobian(fun: Callable[[np.ndarray], np.ndarray], p: np.ndarray, r0: np.ndarray, rel: float) -> np.ndarray:
    """Central-difference Jacobian with a step scaled to each parameter (second-order accurate)."""
    J = np.empty((r0.size, p.size))
    for i in range(p.size):
        h = rel * max(abs(p[i]), 1e-8)
        up, dn = p.copy(), p.copy()
        up[i] += h
        dn[i] -= h
        J[:, i] = (fun(up) - fun(dn)) / (2.0 * h)
    return J


def least_squares_fit(
    fun: Callable[[np.ndarray], np.ndarray],
    p0: Sequence[float],
    *,
    names: Sequence[str],
    jac: Callable[[np.ndarray], np.ndarray] | None = None,
    bounds: tuple[Sequence[float], Sequence[float]] | None = None,
    profile: bool = True,
    max_nfev: int = 2000,
    diff_step: float | None = None,
    tolerance: float = 1e-15,
    deadline: float | None = None,
) -> FitResult:
    """Fit ``fun(p) -> residuals`` by least squares and report estimates with their uncertainty.

    Parameters
    ----------
    fun : callable
        Residual vector r(p) [units of the data].
    p0 : sequence of float
        Starting values.
    names : sequence of str
        One name per parameter (messages and answers).
    jac : callable, optional
        Analytic Jacobian dr/dp; default: finite differences (central at the optimum).
    bounds : (lower, upper), optional
        Bounds on the parameters (trust-region reflective); default unbounded (Levenberg-Marquardt).
    profile : bool
        Compute profile-likelihood 95 % intervals (costs a fit of the other parameters per profile point).
    max_nfev : int
        Most residual evaluations of the main fit.
    diff_step : float, optional
        Relative step of the finite differences (scipy's ``diff_step``); give about the square root of the
        residuals' relative noise when they come from an integrator (default: machine-precision steps).
    tolerance : float
        ``xtol``, ``ftol`` and ``gtol`` of the main fit (scipy's meaning). The default asks for every digit (the
        NIST checks); a fit whose every evaluation is an integration gives about 1e-10, far inside the
        standard errors, and saves the last iterations.
    deadline : float, optional
        ``time.monotonic()`` past which the profiles stop: sides not yet found are reported open, with a
        warning saying the time ran out (the estimates and linearised standard errors are still given).

    Returns
    -------
    FitResult

    Raises
    ------
    ModelInputError
        Fewer observations than parameters, or names and p0 of different lengths.
    ConvergenceError
        The residuals are not finite at the start.

    Examples
    --------
    >>> x = np.array([0.0, 1.0, 2.0, 3.0]); y = np.array([1.0, 3.1, 4.9, 7.2])
    >>> fit = least_squares_fit(lambda p: p[0] + p[1] * x - y, [0.0, 1.0], names=["a", "b"], profile=False)
    >>> [round(v, 4) for v in fit.estimates]
    [0.97, 2.04]
    """
    p0 = np.asarray(p0, dtype=float)
    names = tuple(names)
    if len(names) != p0.size:
        raise ModelInputError(f"{p0.size} starting values for {len(names)} names", field="fit")
    nfev = 0

    def counted(p: np.ndarray) -> np.ndarray:
        nonlocal nfev
        nfev += 1
        return np.asarray(fun(p), dtype=float)

    r0 = counted(p0)
    if not np.all(np.isfinite(r0)):
        raise ConvergenceError("the residuals are not finite at the starting values")
    n, p = r0.size, p0.size
    if n <= p:
        raise ModelInputError(f"{n} observations cannot determine {p} parameters (need more than {p})", field="fit")
    lo, hi = (np.full(p, -np.inf), np.full(p, np.inf)) if bounds is None else (np.asarray(b, float) for b in bounds)
    bounded = bool(np.any(np.isfinite(lo)) or np.any(np.isfinite(hi)))
    method = "trf" if bounded else "lm"
    kw = {"xtol": tolerance, "ftol": tolerance, "gtol": tolerance, "max_nfev": max_nfev, "x_scale": "jac",
          "diff_step": diff_step}  # fmt: skip
    sol = least_squares(counted, p0, jac=jac if jac is not None else "2-point", method=method, bounds=(lo, hi), **kw)
    est = sol.x
    r = counted(est)
    ssr = float(r @ r)
    dof = n - p
    s2 = ssr / dof
    J = jac(est) if jac is not None else _jacobian(counted, est, r, diff_step or 1e-6)
    warnings: list[str] = []
    try:
        # the pseudo-inverse through an SVD, so a rank-deficient J still gives numbers (flagged below)
        U, sv, Vt = np.linalg.svd(J, full_matrices=False)
        tol = sv[0] * max(J.shape) * np.finfo(float).eps
        keep = sv > tol
        inv = np.where(keep, 1.0 / np.where(keep, sv, 1.0) ** 2, 0.0)
        cov = (Vt.T * inv) @ Vt * s2
        if not np.all(keep):
            # directions the data do not constrain: infinite variance along them
            free = np.abs(Vt[~keep]).sum(axis=0) > 1e-12
            cov[free, :] = np.inf
            cov[:, free] = np.inf
            warnings.append("the data cannot determine every parameter: the sensitivity matrix is rank-deficient")
    except np.linalg.LinAlgError:  # pragma: no cover - SVD of a finite matrix does not fail in practice
        cov = np.full((p, p), np.inf)
    se = np.sqrt(np.abs(np.diag(cov)))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        corr = cov / np.outer(se, se)
    corr = np.where(np.isfinite(corr), corr, np.nan)
    np.fill_diagonal(corr, 1.0)
    for i in range(p):
        for j in range(i + 1, p):
            if abs(corr[i, j]) > CORRELATION_WARNING:
                warnings.append(
                    f"{names[i]} and {names[j]} cannot be told apart from these data (correlation "
                    f"{corr[i, j]:+.4f}); fix one of them or add data that moves them differently"
                )
    intervals: list[tuple[float | None, float | None]] = []
    if profile:
        threshold = ssr * (1.0 + stats.f.ppf(0.95, 1, dof) / dof)
        budget = {"left": PROFILE_EVALUATIONS * p}
        timed_out: list[str] = []

        def budgeted(q: np.ndarray) -> np.ndarray:
            budget["left"] -= 1
            if budget["left"] < 0:
                raise _OutOfBudget
            if deadline is not None and time.monotonic() > deadline:
                raise _OutOfTime
            return counted(q)

        for i in range(p):
            try:
                lo_i, hi_i, _ = _profile_interval(
                    budgeted, est, se, i, threshold, (lo, hi), kw, jac=jac, ssr_min=ssr, cov=cov
                )
            except _OutOfBudget:
                lo_i = hi_i = None
                warnings.append(
                    f"the profile of {names[i]} was not completed within {PROFILE_EVALUATIONS * p} evaluations: "
                    "its interval is left open (the data hardly constrain it)"
                )
            except _OutOfTime:
                lo_i = hi_i = None
                timed_out.append(names[i])
                intervals.append((lo_i, hi_i))
                continue
            intervals.append((lo_i, hi_i))
            if lo_i is None or hi_i is None:
                warnings.append(
                    f"{names[i]} is not identifiable from these data: its profile stays flat "
                    + ("on both sides of" if lo_i is None and hi_i is None else "below" if lo_i is None else "above")
                    + " the estimate"
                )
        if timed_out:
            warnings.append(
                f"the time allowed ran out before the profile of {', '.join(timed_out)} was complete: its 95 % "
                "interval is not given (the standard error is the linearised one)"
            )
    else:
        t = stats.t.ppf(0.975, dof)
        intervals = [(float(e - t * s), float(e + t * s)) for e, s in zip(est, se, strict=True)]
    return FitResult(
        names=names,
        estimates=est,
        standard_errors=se,
        covariance=cov,
        correlations=corr,
        interval_95=tuple(intervals),
        ssr=ssr,
        residual_sd=math.sqrt(s2),
        n_obs=n,
        dof=dof,
        warnings=tuple(warnings),
        success=bool(sol.success),
        message=str(sol.message),
        nfev=nfev,
        residuals=r,
    )


class _OutOfBudget(Exception):
    """The profiles used up their evaluations."""


class _OutOfTime(Exception):
    """The profiles ran past the deadline."""


def _profile_interval(
    fun: Callable[[np.ndarray], np.ndarray],
    est: np.ndarray,
    se: np.ndarray,
    i: int,
    threshold: float,
    bounds: tuple[np.ndarray, np.ndarray],
    kw: dict,
    *,
    jac: Callable[[np.ndarray], np.ndarray] | None = None,
    ssr_min: float | None = None,
    cov: np.ndarray | None = None,
) -> tuple[float | None, float | None, int]:
    """Both ends of the profile-likelihood interval of parameter i (None where the profile stays flat).

    Each profile point re-fits the other parameters with parameter i held. Its starting point is predicted:
    from the estimates' covariance at the first step out (the linearised conditional optimum,
    others + Cov[o, i]/Cov[i, i] (v - est_i)) and by extrapolating the last two profile points after that, so a
    near-linear profile needs one or two Gauss-Newton steps per point.
    """
    p = est.size
    others = [k for k in range(p) if k != i]
    lo, hi = bounds
    slope = np.zeros(len(others))
    if cov is not None and others and np.isfinite(cov[i, i]) and cov[i, i] > 0:
        s = cov[others, i] / cov[i, i]
        slope = np.where(np.isfinite(s), s, 0.0)
    path: list[tuple[float, np.ndarray]] = []

    def guess(v: float) -> np.ndarray:
        if len(path) >= 2:
            (v1, x1), (v2, x2) = path[-2], path[-1]
            if v2 != v1:
                return x2 + (x2 - x1) * (v - v2) / (v2 - v1)
        if path:
            v1, x1 = path[-1]
            return x1 + slope * (v - v1)
        return est[others] + slope * (v - est[i])

    def profile_ssr(v: float) -> float:
        if not others:
            r = fun(np.array([v]))
            return float(r @ r) if np.all(np.isfinite(r)) else math.inf

        def full_of(q: np.ndarray) -> np.ndarray:
            full = est.copy()
            full[others] = q
            full[i] = v
            return full

        def sub(q: np.ndarray) -> np.ndarray:
            return fun(full_of(q))

        def sub_jac(q: np.ndarray) -> np.ndarray:
            return jac(full_of(q))[:, others]  # type: ignore[misc]

        sub_bounded = bool(np.any(np.isfinite(lo[others])) or np.any(np.isfinite(hi[others])))
        start = np.clip(guess(v), lo[others], hi[others])
        if not np.all(np.isfinite(sub(start))):
            start = np.clip(path[-1][1] if path else est[others], lo[others], hi[others])
            if not np.all(np.isfinite(sub(start))):
                return math.inf  # the model cannot be evaluated there: far outside the interval
        sol = least_squares(
            sub,
            start,
            jac=sub_jac if jac is not None else "2-point",
            method="trf" if sub_bounded else "lm",
            bounds=(lo[others], hi[others]),
            **{**kw, **sub_tol, "max_nfev": 40},
        )
        path.append((v, sol.x.copy()))
        return float(sol.fun @ sol.fun)

    step = se[i] if np.isfinite(se[i]) and se[i] > 0 else max(abs(est[i]) * 0.1, 1e-8)
    sub_tol = {"xtol": 1e-7, "ftol": 1e-9, "gtol": 1e-9}
    if ssr_min is None:
        ssr_min = profile_ssr(float(est[i]))
    target = math.sqrt(max(threshold - ssr_min, 0.0))
    # a profile point's sum of squares is needed to a small part of the threshold's rise above the minimum
    # (1e-3 of it moves the interval's end by about 0.05 % of its half-width), not to machine precision:
    # the sub-fits stop there, which saves them their last Gauss-Newton steps
    rise = max(threshold - ssr_min, 0.0)
    sub_ftol = min(max(1e-3 * rise / ssr_min, 1e-10), 1e-4) if ssr_min > 0 else 1e-10
    sub_tol.update(xtol=1e-6, ftol=sub_ftol, gtol=1e-10)
    t_quad = 2.0  # first probe: about where a near-linear profile crosses the 95 % threshold
    ends: list[float | None] = []
    for direction in (-1.0, 1.0):
        path.clear()
        limit = lo[i] if direction < 0 else hi[i]

        def z(v: float) -> float:
            # the signed root of the profile's rise (the "profile t" of Bates & Watts, ch. 6): nearly linear
            # in v, so a secant iteration on it converges in a few profile fits
            return math.sqrt(max(profile_ssr(v) - ssr_min, 0.0))

        v_a, z_a = float(est[i]), 0.0
        v_b = float(est[i] + direction * t_quad * step)
        end: float | None = None
        for _ in range(30):
            if np.isfinite(limit) and direction * (v_b - limit) >= 0:
                v_b = float(limit)
            z_b = z(v_b)
            if not math.isfinite(z_b):
                v_b = 0.5 * (v_a + v_b)  # past where the model can be evaluated: come back halfway
                continue
            if abs(z_b - target) <= 1e-2 * target:  # the end to 1 % of the interval's half-width
                end = v_b
                break
            at_limit = np.isfinite(limit) and v_b == limit
            far = abs(v_b - est[i]) > PROFILE_MAX_SE * step
            if z_b < target and (at_limit or far):
                break  # flat out to the search limit: open side
            if z_b <= z_a + 1e-12 * target:
                v_new = v_b + direction * 2.0 * abs(v_b - est[i])  # no rise yet: step out
            else:
                v_new = v_b + (target - z_b) * (v_b - v_a) / (z_b - z_a)
                if direction * (v_new - est[i]) <= 0:  # the secant turned back: bisect towards the estimate
                    v_new = 0.5 * (float(est[i]) + v_b)
            v_a, z_a, v_b = v_b, z_b, float(v_new)
        ends.append(end)
    return ends[0], ends[1], 0
