"""The setpoint check under uncertain data (DESIGN.md §11): how likely the verdict would be worse.

The nominal check (``exomap.core.check.check_setpoint``) runs once, upsets included. Then every sample of the
scenario's uncertainty block (``exomap.core.uncertainty.draw``) is judged by the same verdict rules
(``check.RULES``) fed with that sample's steady states, region, safety figures and margins; the upset battery
is simulated on the nominal parameters only, and its outcomes count for every sample (so a nominal upset that
makes the check marginal makes every sample at least marginal). The margins per sample come from the manifold's folds
(``exomap.core.opmap.fold_columns``) rather than from tracing whole branches:

* feed-temperature rise to ignition and drop to extinction: the refined folds of the column at the set
  residence time (exact, like the branch's turning points);
* residence-time rise to ignition: the ignition fold's feed temperature on ``RESIDENCE_SCAN`` columns from the
  set residence time to ``RESIDENCE_SPAN`` times the threshold above it; where it comes down through the set
  feed temperature, the crossing is refined by false position in ln(tau) on single columns (to 1e-6 K in the
  fold's feed temperature). No ignition within the scan leaves the margin undefined there (it is at least
  the span, so above the threshold);
* residence-time drop to extinction has no threshold and is not computed per sample.

Answer block: ``samples``, ``seed``, ``probability_outside``, ``probability_marginal_or_worse`` (each with its
count and its exact one-sided 95 % binomial bound in ``upper_bound_95``), ``undetermined`` (samples whose
computation failed; counted as outside and as marginal or worse, the cautious side), ``quantiles`` (5/50/95 %)
of the steady temperature, MTSR and TMRad over the samples, and ``drivers`` (the change of the steady
temperature and MTSR per standard deviation of each parameter, least squares on the standard normals).

When the bound on the probability of ``outside`` exceeds ``check_policy.max_unsafe_probability`` the check
gets a reason saying so, and a verdict of ``inside`` becomes ``marginal``: the nominal numbers pass, the data
do not support it with confidence.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from exomap.core import check as check_mod
from exomap.core.errors import ConvergenceError, ModelInputError
from exomap.core.manifold import Manifold
from exomap.core.scenario import Scenario
from exomap.core.uncertainty import BOUND_BASIS, ParameterSamples, UncertaintySpec, draw, upper_bound

#: Columns of the residence-time scan for the ignition margin, and how far it reaches (times the threshold).
RESIDENCE_SCAN = 12
RESIDENCE_SPAN = 2.0
#: Most refinement steps of the residence-time crossing (one manifold column each).
CROSSING_ITERATIONS = 30
#: ... and how close the ignition fold's feed temperature must come to the set one [K] (within 1e-5 % points of
#: the traced margin in the tests; each step costs one column of the map machinery, about 1-2 ms).
CROSSING_TOLERANCE = 1e-6
#: How each sample's margins are found, said in the answer.
MARGINS_NOTE = (
    "each sample's feed-temperature margins are its refined folds at the set residence time; its residence-time "
    "margin to ignition is looked for up to twice its threshold and refined to 1e-6 K of the ignition fold's feed "
    "temperature; the residence-time drop to extinction (no threshold) is not computed per sample"
)
#: Quantiles reported.
QUANTILES = (0.05, 0.5, 0.95)


@dataclass(frozen=True)
class SampleOutcome:
    """The check of one sample without upsets."""

    verdict: str
    T: float
    mtsr: float
    tmr_ad: float


@dataclass(frozen=True)
class UncertainCheckResult:
    """The nominal check with an ``uncertainty`` block; ``to_dict()`` is the check answer plus that block."""

    nominal: Any  # CheckResult
    verdict: str
    reasons: tuple[str, ...]
    samples: ParameterSamples
    outcomes: tuple[SampleOutcome, ...]
    max_unsafe_probability: float
    success: bool
    message: str

    def counts(self) -> dict[str, int]:
        v = [o.verdict for o in self.outcomes]
        und = v.count("undetermined")
        return {
            "outside": v.count("outside") + und,
            "marginal_or_worse": v.count("outside") + v.count("marginal") + und,
            "undetermined": und,
        }

    def block(self) -> dict:
        n = self.samples.n
        c = self.counts()
        T = np.array([o.T for o in self.outcomes])
        mtsr = np.array([o.mtsr for o in self.outcomes])
        tmr = np.array([o.tmr_ad for o in self.outcomes])

        def q(x: np.ndarray) -> dict:
            x = x[np.isfinite(x)]
            if x.size == 0:
                return {f"q{round(100 * p):02d}": None for p in QUANTILES}
            return {f"q{round(100 * p):02d}": float(np.quantile(x, p)) for p in QUANTILES}

        return {
            "samples": n,
            "seed": self.samples.spec.seed,
            "reference_temperature_K": self.samples.T_ref,
            "parameters": list(self.samples.targets),
            "probability_outside": c["outside"] / n,
            "probability_marginal_or_worse": c["marginal_or_worse"] / n,
            "counts": c,
            "upper_bound_95": {
                "outside": float(upper_bound(c["outside"], n)),
                "marginal_or_worse": float(upper_bound(c["marginal_or_worse"], n)),
            },
            "upper_bound_basis": BOUND_BASIS,
            "max_unsafe_probability": self.max_unsafe_probability,
            "quantiles": {"temperature_K": q(T), "mtsr_K": q(mtsr), "tmr_ad_s": q(tmr)},
            "drivers": _drivers(self.samples, T, mtsr),
            "upsets": "run on the nominal parameters only",
            "margins": MARGINS_NOTE,
        }

    def to_dict(self) -> dict:
        d = self.nominal.to_dict()
        d["verdict"] = self.verdict
        d["reasons"] = list(self.reasons)
        d["uncertainty"] = self.block()
        return d


def _drivers(ps: ParameterSamples, T: np.ndarray, mtsr: np.ndarray) -> list[dict]:
    d = ps.z.shape[1]
    if d == 0:
        return []
    out = []
    coef = {}
    for name, y in (("temperature", T), ("mtsr", mtsr)):
        ok = np.isfinite(y)
        if ok.sum() < d + 2:
            coef[name] = np.full(d, np.nan)
            continue
        A = np.column_stack((np.ones(ok.sum()), ps.z[ok]))
        coef[name] = np.linalg.lstsq(A, y[ok], rcond=None)[0][1:]
    for k, t in enumerate(ps.targets):
        a, b = coef["temperature"][k], coef["mtsr"][k]
        out.append(
            {
                "target": t,
                "temperature_K_per_sd": None if not np.isfinite(a) else round(float(a), 4),
                "mtsr_K_per_sd": None if not np.isfinite(b) else round(float(b), 4),
            }
        )
    out.sort(key=lambda r: -max(abs(r["temperature_K_per_sd"] or 0.0), abs(r["mtsr_K_per_sd"] or 0.0)))
    return out


def _fold_margins(sc: Scenario, tau: float, T_in: float, T: float, hot: bool) -> list[Any]:
    """Margins along feed temperature and residence time from the manifold's folds (see the module doc)."""
    from exomap.core import opmap

    Margin = check_mod.Margin
    pol = sc.policy
    mf = Manifold(sc)
    lo, hi = sc.map.T_in_range if sc.map else (sc.T_in - 40.0, sc.T_in + 40.0)
    lo, hi = min(lo, T_in - 1.0), max(hi, T_in + 1.0)
    span = RESIDENCE_SPAN * max(pol.min_residence_time_margin, 0.05)
    taus = tau * (1.0 + span * np.linspace(0.0, 1.0, RESIDENCE_SCAN + 1))
    T_lo, T_hi = mf.temperature_window(lo, hi, float(taus[-1]))
    N = opmap.SAMPLES_EXPLICIT if mf.explicit else opmap.SAMPLES_GENERAL
    cols = opmap.fold_columns(mf, mf.sample(taus, T_lo, T_hi, N))
    f = cols.fold
    at0 = cols.fold_col == 0
    ign_T = [
        v - T_in for v, t, r in zip(f.T_in[at0], f.T[at0], cols.rising[at0], strict=True) if r and v > T_in and t > T
    ]
    ext_T = [
        T_in - v
        for v, t, r in zip(f.T_in[at0], f.T[at0], cols.rising[at0], strict=True)
        if not r and v < T_in and t < T
    ]
    # the lowest ignition fold above the state's temperature, column by column
    ign = np.full(taus.size, np.nan)
    keep = cols.rising & (f.T > T)
    np.fmin.at(ign, cols.fold_col[keep], f.T_in[keep])

    def ignition_at(x: float) -> float:
        """The lowest ignition fold's feed temperature above the state's temperature at tau = e^x [K]."""
        c = opmap.fold_columns(mf, mf.sample(np.array([math.exp(x)]), T_lo, T_hi, N))
        up = c.rising & (c.fold.T > T)
        return float(np.min(c.fold.T_in[up])) if up.any() else math.nan

    ign_tau: list[float] = []
    if not hot:
        for k in range(1, taus.size):
            a, b = ign[k - 1], ign[k]
            if np.isfinite(a) and np.isfinite(b) and a > T_in >= b:
                x = _crossing(ignition_at, math.log(taus[k - 1]), math.log(taus[k]), a - T_in, b - T_in, T_in)
                ign_tau.append(100.0 * (math.exp(x) / tau - 1.0))
                break
    ign_T = [] if hot else ign_T
    ext_T = ext_T if hot else []

    def margin(key: str, values: list[float], threshold: float, what: str) -> Any:
        if values:
            return Margin(key, min(values), threshold)
        return Margin(key, None, threshold, what)

    return [
        margin("feed_temperature_rise_to_ignition_K", ign_T, pol.min_feed_temperature_margin, "no ignition ahead"),
        margin(
            "residence_time_rise_to_ignition_percent",
            ign_tau,
            100.0 * pol.min_residence_time_margin,
            f"no ignition within {100 * span:.0f} % of the residence time",
        ),
        margin("feed_temperature_drop_to_extinction_K", ext_T, pol.min_extinction_margin, "no extinction below"),
    ]


def _crossing(f: Callable[[float], float], x0: float, x1: float, g0: float, g1: float, T_in: float) -> float:
    """Where ``f(x) - T_in`` changes sign between x0 (value g0 > 0) and x1 (g1 <= 0): the Illinois variant of
    false position on ln(tau), to ``CROSSING_TOLERANCE`` in the fold's feed temperature or 1e-9 in ln(tau). A
    point with no ignition fold above the state counts as not yet ignited (the x0 side)."""
    for _ in range(CROSSING_ITERATIONS):
        x = x0 + g0 / (g0 - g1) * (x1 - x0) if g0 != g1 else 0.5 * (x0 + x1)
        if not (min(x0, x1) < x < max(x0, x1)):
            x = 0.5 * (x0 + x1)
        v = f(x)
        g = v - T_in if math.isfinite(v) else 1.0
        if abs(g) <= CROSSING_TOLERANCE or abs(x1 - x0) <= 1e-9:
            return x
        if g > 0:
            x0, g0 = x, g
            g1 *= 0.5
        else:
            x1, g1 = x, g
            g0 *= 0.5
    return x0 + g0 / (g0 - g1) * (x1 - x0)


def sample_outcome(
    sc: Scenario, tau: float, T_in: float, branch: str | None, upsets: tuple[Any, ...] = ()
) -> SampleOutcome:
    """The verdict of one sample scenario by the check's rules, with the given (nominal) upset outcomes."""
    from exomap.core.regions import region_of
    from exomap.core.safety import safety_figures
    from exomap.core.steady import steady_states

    nan = float("nan")
    try:
        steady = steady_states(sc, tau, T_in)
    except (ModelInputError, ConvergenceError):
        return SampleOutcome("undetermined", nan, nan, nan)
    if not steady.states or not steady.success:
        return SampleOutcome("undetermined", nan, nan, nan)
    idx, _ = check_mod.pick_state(steady.states, branch)
    st = steady.states[idx]
    safety = safety_figures(sc, tau, T_in, st)
    hot = len(steady.states) > 1 and idx == len(steady.states) - 1
    try:
        margins = _fold_margins(sc, tau, T_in, float(st.T), hot)
    except (ModelInputError, ConvergenceError):
        return SampleOutcome("undetermined", float(st.T), safety.mtsr, safety.tmr_ad)
    pol, lim = sc.policy, sc.limits
    margins.append(check_mod.Margin("steady_temperature_to_max_K", lim.T_max - float(st.T), pol.min_temperature_margin))
    margins.append(check_mod.Margin("mtsr_to_max_K", lim.T_max - safety.mtsr, pol.min_mtsr_margin))
    ev = check_mod.Evidence(sc, steady, idx, region_of(sc, steady.states), tuple(margins), safety, tuple(upsets))
    verdict, _ = check_mod.judge(ev)
    return SampleOutcome(verdict, float(st.T), float(safety.mtsr), float(safety.tmr_ad))


def uncertain_check(
    sc: Scenario,
    spec: UncertaintySpec | None = None,
    *,
    tau: float | None = None,
    T_in: float | None = None,
    branch: str | None = None,
    samples: int | None = None,
    seed: int | None = None,
    progress: Callable[[float], None] | None = None,
    **check_options: Any,
) -> UncertainCheckResult:
    """The setpoint check with the probability that its verdict would be worse under the stated uncertainty.

    Parameters
    ----------
    sc : Scenario
    spec : UncertaintySpec, optional
        Default: ``sc.uncertainty``.
    tau, T_in, branch
        As for ``check_setpoint`` ([s], [K]).
    samples, seed : int, optional
        Override the spec's.
    progress : callable, optional
        Called with the share of samples done [-].

    Returns
    -------
    UncertainCheckResult

    Raises
    ------
    ModelInputError
        No uncertainty block, or a bad one (``field`` names it).
    """
    spec = spec if spec is not None else getattr(sc, "uncertainty", None)
    if spec is None:
        raise ModelInputError(
            "the scenario has no uncertainty block: add one with the uncertain parameters (DESIGN.md §11)",
            field="uncertainty",
        )
    ps = draw(sc, spec, samples=samples, seed=seed)
    nominal = check_mod.check_setpoint(sc, tau=tau, T_in=T_in, branch=branch, **check_options)
    outcomes = []
    for i in range(ps.n):
        outcomes.append(sample_outcome(ps.scenario(i), nominal.tau, nominal.T_in, branch, nominal.upsets))
        if progress and (i + 1) % 16 == 0:
            progress((i + 1) / ps.n)
    limit = sc.policy.max_unsafe_probability
    res = UncertainCheckResult(nominal, nominal.verdict, tuple(nominal.reasons), ps, tuple(outcomes), limit, True, "")
    c = res.counts()
    bound = float(upper_bound(c["outside"], ps.n))
    verdict, reasons = nominal.verdict, list(nominal.reasons)
    if bound > limit and verdict != "undetermined":
        text = (
            f"under the stated uncertainty the verdict would be outside in {c['outside']} of {ps.n} samples "
            f"(probability {c['outside'] / ps.n:.3f}, 95 % upper bound {bound:.3f}), above the acceptable "
            f"{limit:g} (check_policy.max_unsafe_probability, "
            + ("project default" if "max_unsafe_probability" not in _set_fields(sc) else "set in the scenario")
            + "); upsets were run on the nominal parameters only"
        )
        if c["outside"] == 0:
            need = math.ceil(math.log(0.05) / math.log(1.0 - limit)) if 0 < limit < 1 else ps.n
            text += f" (with {ps.n} samples even none outside bounds it at {bound:.3f}: take at least {need})"
        if verdict == "inside":
            verdict, reasons = "marginal", [text]
        else:
            reasons.append(text)
    msg = f"{ps.n} samples (seed {ps.spec.seed}); {c['undetermined']} could not be computed"
    return replace(res, verdict=verdict, reasons=tuple(reasons), message=msg)


def _set_fields(sc: Scenario) -> set[str]:
    """Policy fields that differ from the project defaults."""
    from exomap.core.scenario import CheckPolicy

    default = CheckPolicy()
    return {k for k in default.__dataclass_fields__ if getattr(sc.policy, k) != getattr(default, k)}


__all__ = ["SampleOutcome", "UncertainCheckResult", "sample_outcome", "uncertain_check"]
