"""The setpoint check under uncertain data (DESIGN.md §11): how likely the verdict would be worse.

The nominal check (``exomap.core.check.check_setpoint``) runs once, upsets included. Then every sample of the
scenario's uncertainty block (``exomap.core.uncertainty.draw``) is judged by the same verdict rules
(``check.RULES``) fed with that sample's steady states, region, safety figures and margins; the upset battery
is simulated on the nominal parameters only, and its outcomes count for every sample (so a nominal upset that
makes the check marginal makes every sample at least marginal). The margins per sample come from the manifold's
folds (``exomap.core.opmap.fold_columns``) rather than from tracing whole branches, with the scan columns of all
samples stacked into one pass (``exomap.core.stacked``, as the probability map does):

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
from exomap.core.stacked import StackedManifold, stacked_class
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


def _window(sc: Scenario, tau: float, T_in: float) -> tuple[tuple[float, float], float, np.ndarray]:
    """(feed-temperature window [K], residence-time span [-], scan columns [s]) of the margins."""
    pol = sc.policy
    lo, hi = sc.map.T_in_range if sc.map else (sc.T_in - 40.0, sc.T_in + 40.0)
    span = RESIDENCE_SPAN * max(pol.min_residence_time_margin, 0.05)
    taus = tau * (1.0 + span * np.linspace(0.0, 1.0, RESIDENCE_SCAN + 1))
    return (min(lo, T_in - 1.0), max(hi, T_in + 1.0)), span, taus


def _scan(
    taus: np.ndarray,
    T_in: float,
    T: float,
    hot: bool,
    v: np.ndarray,
    t: np.ndarray,
    rising: np.ndarray,
    col: np.ndarray,
) -> tuple[list[float], list[float], tuple[int, float, float] | None]:
    """From one sample's folds on the scan columns (feed temperature ``v``, temperature ``t``, whether an
    ignition, column index): the feed-temperature rises to ignition and drops to extinction at the set
    residence time, and the scan interval ``(k, g0, g1)`` where the lowest ignition fold above the state comes
    down through the set feed temperature (g = fold's feed temperature - T_in), if any."""
    at0 = col == 0
    ign_T = [] if hot else [float(x - T_in) for x in v[at0 & rising & (v > T_in) & (t > T)]]
    ext_T = [float(T_in - x) for x in v[at0 & ~rising & (v < T_in) & (t < T)]] if hot else []
    ign = np.full(taus.size, np.nan)
    keep = rising & (t > T)
    np.fmin.at(ign, col[keep], v[keep])
    if not hot:
        for k in range(1, taus.size):
            a, b = ign[k - 1], ign[k]
            if np.isfinite(a) and np.isfinite(b) and a > T_in >= b:
                return ign_T, ext_T, (k, float(a - T_in), float(b - T_in))
    return ign_T, ext_T, None


def _crossings(
    ignition_at: Callable[[np.ndarray, np.ndarray], np.ndarray],
    x0: np.ndarray,
    x1: np.ndarray,
    g0: np.ndarray,
    g1: np.ndarray,
    T_in: float,
) -> np.ndarray:
    """Where the lowest ignition fold's feed temperature comes down through T_in between ln(tau) = x0 (g0 > 0)
    and x1 (g1 <= 0), for many brackets at once: the Illinois variant of false position, to
    ``CROSSING_TOLERANCE`` in the fold's feed temperature or 1e-9 in ln(tau). ``ignition_at(active, x)`` gives
    the fold's feed temperature of the brackets ``active`` at ln(tau) = x (NaN: no ignition fold above the
    state there, counted as not yet ignited, the x0 side)."""
    x0, x1, g0, g1 = (np.array(a, dtype=float) for a in (x0, x1, g0, g1))
    out = np.full(x0.shape, np.nan)
    act = np.arange(x0.size)
    for _ in range(CROSSING_ITERATIONS):
        if act.size == 0:
            return out
        a0, a1, h0, h1 = x0[act], x1[act], g0[act], g1[act]
        with np.errstate(invalid="ignore", divide="ignore"):
            x = a0 + h0 / (h0 - h1) * (a1 - a0)
        x = np.where(np.isfinite(x) & (x > np.minimum(a0, a1)) & (x < np.maximum(a0, a1)), x, 0.5 * (a0 + a1))
        v = ignition_at(act, x)
        g = np.where(np.isfinite(v), v - T_in, 1.0)
        done = (np.abs(g) <= CROSSING_TOLERANCE) | (np.abs(a1 - a0) <= 1e-9)
        out[act[done]] = x[done]
        up = g > 0
        x0[act] = np.where(up, x, a0)
        g0[act] = np.where(up, g, 0.5 * h0)
        x1[act] = np.where(up, a1, x)
        g1[act] = np.where(up, 0.5 * h1, g)
        act = act[~done]
    with np.errstate(invalid="ignore", divide="ignore"):
        out[act] = x0[act] + g0[act] / (g0[act] - g1[act]) * (x1[act] - x0[act])
    return out


def _assemble(sc: Scenario, span: float, ign_T: list[float], ign_tau: list[float], ext_T: list[float]) -> list[Any]:
    """The three fold margins of the check (``check.Margin``), None with a note where there is none."""
    pol = sc.policy
    Margin = check_mod.Margin

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


def _fold_margins(sc: Scenario, tau: float, T_in: float, T: float, hot: bool) -> list[Any]:
    """Margins along feed temperature and residence time from the manifold's folds (see the module doc), for
    one scenario (the reference of :func:`stacked_fold_margins`)."""
    from exomap.core import opmap

    mf = Manifold(sc)
    (lo, hi), span, taus = _window(sc, tau, T_in)
    T_lo, T_hi = mf.temperature_window(lo, hi, float(taus[-1]))
    N = opmap.SAMPLES_EXPLICIT if mf.explicit else opmap.SAMPLES_GENERAL
    cols = opmap.fold_columns(mf, mf.sample(taus, T_lo, T_hi, N))
    f = cols.fold
    ign_T, ext_T, bracket = _scan(taus, T_in, T, hot, f.T_in, f.T, cols.rising, cols.fold_col)
    ign_tau: list[float] = []
    if bracket is not None:

        def ignition_at(_: np.ndarray, x: np.ndarray) -> np.ndarray:
            c = opmap.fold_columns(mf, mf.sample(np.exp(x), T_lo, T_hi, N))
            out = np.full(x.shape, np.nan)
            up = c.rising & (c.fold.T > T)
            np.fmin.at(out, c.fold_col[up], c.fold.T_in[up])
            return out

        k, g0, g1 = bracket
        x = _crossings(ignition_at, [math.log(taus[k - 1])], [math.log(taus[k])], [g0], [g1], T_in)[0]
        ign_tau.append(100.0 * (math.exp(x) / tau - 1.0))
    return _assemble(sc, span, ign_T, ign_tau, ext_T)


def stacked_fold_margins(
    ps: ParameterSamples, which: np.ndarray, tau: float, T_in: float, T: np.ndarray, hot: np.ndarray
) -> list[list[Any]] | None:
    """:func:`_fold_margins` of the samples ``which`` (their states' temperatures ``T`` [K] and whether each is
    the hot one), with the scan columns of all of them stacked into one pass of the map's fold machinery
    (``exomap.core.stacked``) and the residence-time crossings refined together. None where the samples cannot
    be stacked (then each is taken on its own)."""
    from exomap.core import opmap

    kind = stacked_class(ps)
    which = np.asarray(which, dtype=np.int64)
    if kind is None or which.size == 0:
        return None
    sc = ps.base
    (lo, hi), span, taus = _window(sc, tau, T_in)
    m = taus.size
    whole = kind(ps, np.full(ps.n, taus[-1]), np.arange(ps.n))
    T_lo, T_hi = whole.window(lo, hi)
    N = opmap.SAMPLES_EXPLICIT if kind is StackedManifold else opmap.SAMPLES_GENERAL
    smf = kind(ps, np.tile(taus, which.size), np.repeat(which, m))
    cols = opmap.fold_columns(smf.core, smf.column_sample(T_lo, T_hi, N))
    f = cols.fold
    owner = cols.fold_col // m
    order = np.argsort(owner, kind="stable")
    starts = np.searchsorted(owner[order], np.arange(which.size + 1))
    scans = []
    for j in range(which.size):
        sel = order[starts[j] : starts[j + 1]]
        scans.append(
            _scan(
                taus, T_in, float(T[j]), bool(hot[j]), f.T_in[sel], f.T[sel], cols.rising[sel], cols.fold_col[sel] % m
            )
        )
    need = [j for j, sc_ in enumerate(scans) if sc_[2] is not None]
    crossing = {}
    if need:
        idx = np.array(need)
        ks = np.array([scans[j][2][0] for j in need])  # type: ignore[index]

        def ignition_at(act: np.ndarray, x: np.ndarray) -> np.ndarray:
            rows = idx[act]
            c_mf = kind(ps, np.exp(x), which[rows])
            c = opmap.fold_columns(c_mf.core, c_mf.column_sample(T_lo, T_hi, N))
            out = np.full(x.shape, np.nan)
            up = c.rising & (c.fold.T > T[rows][c.fold_col])
            np.fmin.at(out, c.fold_col[up], c.fold.T_in[up])
            return out

        xs = _crossings(
            ignition_at,
            np.log(taus[ks - 1]),
            np.log(taus[ks]),
            [scans[j][2][1] for j in need],  # type: ignore[index]
            [scans[j][2][2] for j in need],  # type: ignore[index]
            T_in,
        )
        crossing = {j: 100.0 * (math.exp(x) / tau - 1.0) for j, x in zip(need, xs, strict=True)}
    return [
        _assemble(sc, span, ign_T, [crossing[j]] if j in crossing else [], ext_T)
        for j, (ign_T, ext_T, _) in enumerate(scans)
    ]


def _point_samples(sc: Scenario) -> int:
    """Samples along the manifold for each sample's steady states: as many as the map takes per column (its
    folds, and so every state, are refined to machine precision either way; ``steady_states`` also looks
    inside every sample interval where the slope changes sign), instead of the single point's denser default."""
    from exomap.core import opmap

    return opmap.SAMPLES_EXPLICIT if Manifold(sc).explicit else opmap.SAMPLES_GENERAL


@dataclass(frozen=True)
class _SampleState:
    """One sample's steady states at the setpoint, the one the tank is taken to be on, its safety figures."""

    sc: Scenario
    steady: Any
    idx: int
    safety: Any

    @property
    def T(self) -> float:
        return float(self.steady.states[self.idx].T)

    @property
    def hot(self) -> bool:
        n = len(self.steady.states)
        return n > 1 and self.idx == n - 1


def _sample_state(sc: Scenario, tau: float, T_in: float, branch: str | None) -> _SampleState | None:
    """The steady states of one sample scenario (None: they could not be computed)."""
    from exomap.core.safety import safety_figures
    from exomap.core.steady import steady_states

    try:
        steady = steady_states(sc, tau, T_in, samples=_point_samples(sc))
    except (ModelInputError, ConvergenceError):
        return None
    if not steady.states or not steady.success:
        return None
    idx, _ = check_mod.pick_state(steady.states, branch)
    return _SampleState(sc, steady, idx, safety_figures(sc, tau, T_in, steady.states[idx]))


def _judged(s: _SampleState, margins: list[Any], upsets: tuple[Any, ...]) -> SampleOutcome:
    """The verdict of one sample by the check's rules, with its fold margins and the (nominal) upsets."""
    from exomap.core.regions import region_of

    pol, lim = s.sc.policy, s.sc.limits
    margins = [
        *margins,
        check_mod.Margin("steady_temperature_to_max_K", lim.T_max - s.T, pol.min_temperature_margin),
        check_mod.Margin("mtsr_to_max_K", lim.T_max - s.safety.mtsr, pol.min_mtsr_margin),
    ]
    ev = check_mod.Evidence(
        s.sc, s.steady, s.idx, region_of(s.sc, s.steady.states), tuple(margins), s.safety, tuple(upsets)
    )
    verdict, _ = check_mod.judge(ev)
    return SampleOutcome(verdict, s.T, float(s.safety.mtsr), float(s.safety.tmr_ad))


def sample_outcome(
    sc: Scenario, tau: float, T_in: float, branch: str | None, upsets: tuple[Any, ...] = ()
) -> SampleOutcome:
    """The verdict of one sample scenario by the check's rules, with the given (nominal) upset outcomes."""
    nan = float("nan")
    s = _sample_state(sc, tau, T_in, branch)
    if s is None:
        return SampleOutcome("undetermined", nan, nan, nan)
    try:
        margins = _fold_margins(sc, tau, T_in, s.T, s.hot)
    except (ModelInputError, ConvergenceError):
        return SampleOutcome("undetermined", s.T, s.safety.mtsr, s.safety.tmr_ad)
    return _judged(s, margins, upsets)


def sample_outcomes(
    ps: ParameterSamples,
    tau: float,
    T_in: float,
    branch: str | None,
    upsets: tuple[Any, ...] = (),
    progress: Callable[[float], None] | None = None,
) -> list[SampleOutcome]:
    """:func:`sample_outcome` of every sample, with the fold margins of all of them computed in one stacked
    pass (:func:`stacked_fold_margins`) where the samples allow it."""
    nan = float("nan")
    states: list[_SampleState | None] = []
    for i in range(ps.n):
        states.append(_sample_state(ps.scenario(i), tau, T_in, branch))
        if progress and (i + 1) % 16 == 0:
            progress(0.9 * (i + 1) / ps.n)
    which = np.array([i for i, s in enumerate(states) if s is not None], dtype=np.int64)
    got = [s for s in states if s is not None]
    try:
        stacked = stacked_fold_margins(
            ps, which, tau, T_in, np.array([s.T for s in got]), np.array([s.hot for s in got], dtype=bool)
        )
    except (ModelInputError, ConvergenceError):
        stacked = None  # each sample on its own below, where a failure is that sample's alone
    margins = dict(zip(which.tolist(), stacked, strict=True)) if stacked is not None else {}
    out = []
    for i, s in enumerate(states):
        if s is None:
            out.append(SampleOutcome("undetermined", nan, nan, nan))
            continue
        if i not in margins:
            try:
                margins[i] = _fold_margins(s.sc, tau, T_in, s.T, s.hot)
            except (ModelInputError, ConvergenceError):
                out.append(SampleOutcome("undetermined", s.T, s.safety.mtsr, s.safety.tmr_ad))
                continue
        out.append(_judged(s, margins[i], upsets))
    if progress:
        progress(1.0)
    return out


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
    outcomes = sample_outcomes(ps, nominal.tau, nominal.T_in, branch, nominal.upsets, progress)
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


__all__ = [
    "SampleOutcome",
    "UncertainCheckResult",
    "sample_outcome",
    "sample_outcomes",
    "stacked_fold_margins",
    "uncertain_check",
]
