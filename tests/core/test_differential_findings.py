"""Regression tests for the disagreements the differential check found (issue 9; docs/differential-findings.md).

Each finding keeps its scenario document in ``tests/reference/findings/<name>.json`` (bare SI numbers, as
the generator wrote it) and the point where exomap went wrong. What is true comes from the independent
reference solver (``tests/reference/solver.py``), and each finding was confirmed by a third way (integrating
the dynamic balances to steady state with scipy's Radau, or a dense scan), as the findings file says. A test
is marked ``xfail(strict=True)`` while its finding is open, so it fails as soon as the fix lands: then remove
the mark.
"""

from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from exomap.core.opmap import operating_map
from exomap.core.regions import REGIONS
from exomap.core.steady import steady_states
from exomap.schema import parse_scenario

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reference.scenarios import problem_from_doc  # noqa: E402
from reference.solver import Reference  # noqa: E402

FINDINGS = Path(__file__).resolve().parents[1] / "reference" / "findings"
KEYS = {code: key for code, key, _ in REGIONS}


def load(name: str):
    rec = json.loads((FINDINGS / f"{name}.json").read_text(encoding="utf-8"))
    doc = rec["scenario"]
    return parse_scenario(doc).to_core(), Reference(problem_from_doc(doc)), rec["point"]


def assert_same_states(sc, ref, tau, T_in):
    want = ref.states(tau, T_in)
    got = steady_states(sc, tau, T_in)
    # the reference's states: count, temperatures to 1e-6 K, stability; no negative concentration
    assert [round(s.T, 6) for s in got.states] == [round(s.T, 6) for s in want]
    assert [s.stability for s in got.states] == [s.stability for s in want]
    assert all(min(s.C) >= 0 for s in got.states)
    assert got.success


def test_bracket_crash_series():
    sc, ref, p = load("bracket-crash-series")
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_bracket_crash_parallel():
    sc, ref, p = load("bracket-crash-parallel")
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_singular_isothermal_jacobian():
    sc, ref, p = load("singular-isothermal-jacobian")
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_spurious_negative_states():
    sc, ref, p = load("spurious-negative-states")
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_map_ignores_reaction_heat():
    sc, ref, p = load("map-ignores-reaction-heat")
    doc_map = json.loads((FINDINGS / "map-ignores-reaction-heat.json").read_text())["scenario"]["map"]
    mp = operating_map(
        sc,
        tau_range=tuple(doc_map["residence_time"]),
        T_in_range=tuple(doc_map["feed_temperature"]),
        points=tuple(p["points"]),
    )
    i, j = p["cell"]
    assert mp.tau[j] == pytest.approx(p["tau"], rel=1e-12) and mp.T_in[i] == pytest.approx(p["T_in"], rel=1e-12)
    want = ref.states(p["tau"], p["T_in"])
    # reference: one stable state about 3.8 K above the feed, above the maximum temperature -> runaway
    assert len(want) == 1 and want[0].T > sc.limits.T_max
    assert mp.max_temperature[i, j] == pytest.approx(want[0].T, abs=1e-4)
    assert KEYS[int(mp.region[i, j])] == ref.region(want) == "runaway"


def test_unpolished_state():
    sc, ref, p = load("unpolished-state")
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_overflow_warning_in_stability():
    sc, ref, p = load("overflow-warning-in-stability")
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        mp = operating_map(sc, tau_range=tuple(p["tau_range"]), T_in_range=tuple(p["T_in_range"]), points=(16, 12))
    assert mp.success
    assert np.all(mp.state_count >= 1)


def assert_map_cell(name: str, ignore_warnings: bool = True):
    sc, ref, p = load(name)
    doc_map = json.loads((FINDINGS / f"{name}.json").read_text())["scenario"]["map"]
    with warnings.catch_warnings():
        if ignore_warnings:  # the answer is what is tested here, not the warning
            warnings.simplefilter("ignore", RuntimeWarning)
        mp = operating_map(
            sc,
            tau_range=tuple(doc_map["residence_time"]),
            T_in_range=tuple(doc_map["feed_temperature"]),
            points=tuple(p["points"]),
        )
    if "cell" in p:
        i, j = p["cell"]
    else:  # the point is a grid point of the map: find its row and column
        i, j = int(np.argmin(np.abs(mp.T_in - p["T_in"]))), int(np.argmin(np.abs(mp.tau - p["tau"])))
    assert mp.tau[j] == pytest.approx(p["tau"], rel=1e-12) and mp.T_in[i] == pytest.approx(p["T_in"], rel=1e-12)
    want = ref.states(p["tau"], p["T_in"])
    assert int(mp.state_count[i, j]) == len(want)
    assert KEYS[int(mp.region[i, j])] == ref.region(want)


def test_missed_states_series():
    sc, ref, p = load("missed-states-series")
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_map_false_unstable():
    assert_map_cell("map-false-unstable")


def test_map_nan_unstable():
    # finding map-nan-unstable, fixed on main (issue 9 defect 3's fix): no NaN, no warning, region right
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        assert_map_cell("map-nan-unstable", ignore_warnings=False)


def test_branch_missed_ignition():
    from exomap.core.branch import branch
    from reference.solver import Column

    sc, ref, p = load("branch-missed-ignition")
    col = Column(ref, p["tau"], *ref.temperature_window(p["lo"], p["hi"], p["tau"]))
    want = [f for f in col.folds if p["lo"] < f.T_in < p["hi"]]
    # reference: one ignition at T_in = 265.9526 K (T = 273.69 K) inside the range
    assert [f.kind for f in want] == ["ignition"]
    got = branch(sc, "feed_temperature", tau=p["tau"], lo=p["lo"], hi=p["hi"])
    assert [t.kind for t in got.turning_points] == ["ignition"]
    assert got.turning_points[0].T_in == pytest.approx(want[0].T_in, abs=1e-6)


def test_hopf_missed_near_fold():
    from exomap.core.branch import branch

    sc, ref, p = load("hopf-missed-near-fold")
    # exomap's own steady states change stability there: a complex pair crosses between 1859.3 s and 1859.9 s
    before, after = steady_states(sc, 1859.3, p["T_in"]).states[0], steady_states(sc, 1859.9, p["T_in"]).states[0]
    assert before.stability == "unstable" and after.stability == "stable" and after.oscillatory
    got = branch(sc, "residence_time", T_in=p["T_in"], lo=p["lo"], hi=p["hi"])
    # reference (bialternate test on a (ln tau, T) grid, fsolve): Hopf at tau = 1859.6048 s, T = 315.5763 K
    assert any(
        h.tau == pytest.approx(p["hopf_tau"], rel=1e-5) and h.T == pytest.approx(p["hopf_T"], abs=1e-3)
        for h in got.hopf_points
    )


def test_hot_state_lost_2A():
    sc, ref, p = load("hot-state-lost-2A")
    # reference: one stable state at 587.946167 K with 1 - X ~ 1e-37 (confirmed by the closed form of 2A -> D at
    # order 0.5: sqrt(C_A) solves C_A0 - C_A = 2 tau k sqrt(C_A), then a scan of the energy balance in T)
    assert_same_states(sc, ref, p["tau"], p["T_in"])


def test_stiff_stability_threshold():
    sc, ref, p = load("stiff-stability-threshold")
    want = [s for s in ref.states(p["tau"], p["T_in"]) if abs(s.T - p["T"]) < 1e-6]
    # reference: leading pair 5.476e-5 +- 1.118e-3 i 1/s (growing; solve_ivp from +0.01 K does not settle back),
    # next to a fast eigenvalue of -1.3e6 1/s that must not set the scale of "positive"
    assert len(want) == 1 and want[0].stability == "unstable"
    got = [s for s in steady_states(sc, p["tau"], p["T_in"]).states if abs(s.T - p["T"]) < 1e-6]
    assert len(got) == 1 and got[0].stability == "unstable" and got[0].oscillatory


@pytest.mark.parametrize("name", ["branch-bracket-crash", "branch-bracket-crash-b"])
def test_branch_bracket_crash(name):
    # finding branch-bracket-crash: a fast second reaction (eigenvalues to -3.5e30 1/s beside -1e-4 1/s) made the
    # leading real part of the whole reduced Jacobian rounding noise (+1618 1/s next to -0.003 1/s), its sign
    # flipped between the vectorised samples and the point-by-point refinement, and Brent's method raised
    from exomap.core.branch import branch
    from reference.solver import Column

    sc, ref, p = load(name)
    col = Column(ref, p["tau"], *ref.temperature_window(p["lo"], p["hi"], p["tau"]))
    want = sorted(f.T_in for f in col.folds if p["lo"] < f.T_in < p["hi"])
    got = branch(sc, "feed_temperature", tau=p["tau"], lo=p["lo"], hi=p["hi"])
    assert sorted(t.T_in for t in got.turning_points) == pytest.approx(want, abs=1e-6)
    assert got.success, got.message


def test_branch_with_a_gap_is_not_success(monkeypatch):
    # a branch whose samples did not all converge, or whose traced piece stopped inside the range, is not
    # complete: success false, and the message says why (issue 9: never success on an incomplete answer)
    import exomap.core.branch as branch_mod
    from exomap.core.manifold import Manifold

    sc, _, p = load("branch-bracket-crash-b")
    real_sample = Manifold.sample

    def holed(self, tau, T_lo, T_hi, N):
        smp = real_sample(self, tau, T_lo, T_hi, N)
        smp.valid[..., N // 2] = False
        return smp

    with monkeypatch.context() as mp:
        mp.setattr(Manifold, "sample", holed)
        got = branch_mod.branch(sc, "feed_temperature", tau=p["tau"], lo=p["lo"], hi=p["hi"])
    assert got.points and not got.success and "did not converge" in got.message

    real_correct = branch_mod._Plane.correct
    calls = {"n": 0}

    def failing(self, X, Y):
        calls["n"] += 1
        X, Y, ok = real_correct(self, X, Y)
        return X, Y, ok and calls["n"] < 40

    with monkeypatch.context() as mp:
        mp.setattr(branch_mod._Plane, "correct", failing)
        got = branch_mod.branch(sc, "residence_time", T_in=345.0, lo=p["tau"] / 3, hi=p["tau"] * 3)
    assert got.points and not got.success and "stopped inside the range" in got.message
    # and without the failure the same branch is complete
    assert branch_mod.branch(sc, "residence_time", T_in=345.0, lo=p["tau"] / 3, hi=p["tau"] * 3).success


def test_steady_states_with_a_gap_is_not_success(monkeypatch):
    # the same for the steady states at a point: an unconverged sample may hide a state
    from exomap.core.manifold import Manifold

    sc, _, p = load("bracket-crash-series")
    assert steady_states(sc, p["tau"], p["T_in"]).success
    real_sample = Manifold.sample

    def holed(self, tau, T_lo, T_hi, N):
        smp = real_sample(self, tau, T_lo, T_hi, N)
        smp.valid[..., N // 2] = False
        return smp

    monkeypatch.setattr(Manifold, "sample", holed)
    got = steady_states(sc, p["tau"], p["T_in"])
    assert not got.success and "did not converge" in got.message


@pytest.mark.parametrize("name", ["map-nan-state", "map-nan-state-b"])
def test_map_nan_state(name):
    # finding map-nan-state: a feed without the reactant of two parallel reactions at order 0.5; the map took
    # r/C_A at a floor C_A = 1e-300 (a derivative of 1e146 1/s where nothing reacts) and called every cell
    # `unstable` with no stable state, success true. Reference: one stable state (320.397538 K at the cell of
    # map-nan-state; solve_ivp settles there)
    assert_map_cell(name)
    sc, _, p = load(name)
    doc_map = json.loads((FINDINGS / f"{name}.json").read_text())["scenario"]["map"]
    mp = operating_map(
        sc, tau_range=tuple(doc_map["residence_time"]), T_in_range=tuple(doc_map["feed_temperature"]), points=(8, 10)
    )
    assert mp.success and np.all(np.isfinite(mp.max_temperature))
    assert not np.any(mp.region == next(c for c, k in KEYS.items() if k == "unstable"))


def test_map_state_not_computed_is_not_classified(monkeypatch):
    # a state whose stability comes out NaN is never labelled: the map says it is incomplete, and no cell that
    # holds one is called `unstable` (it may be reachable) or given a maximum temperature
    from exomap.core.manifold import Manifold

    sc, _, p = load("map-nan-state")
    doc_map = json.loads((FINDINGS / "map-nan-state.json").read_text())["scenario"]["map"]
    real = Manifold.stability

    def broken(self, tau, T, xi, C=None):
        stable, h, ok = real(self, tau, T, xi, C)
        h = np.where(T > 340.0, np.nan, h)
        return stable & np.isfinite(h), h, ok

    window = dict(
        tau_range=tuple(doc_map["residence_time"]), T_in_range=tuple(doc_map["feed_temperature"]), points=(8, 10)
    )
    before = operating_map(sc, **window)
    assert before.success and np.all(before.state_count == 1)
    monkeypatch.setattr(Manifold, "stability", broken)
    mp = operating_map(sc, **window)
    hit = before.max_temperature > 340.5  # cells whose one state now has no stability
    assert hit.any() and (before.max_temperature < 339.5).any()
    assert not mp.success and "could not be computed" in mp.message
    assert np.all(np.isnan(mp.max_temperature[hit]))
    assert not np.any(mp.region[hit] == next(c for c, k in KEYS.items() if k == "unstable"))
    low = before.max_temperature < 339.5
    assert np.array_equal(mp.max_temperature[low], before.max_temperature[low])
    assert np.array_equal(mp.region[low], before.region[low])


def test_negative_concentration_rounding():
    # finding negative-concentration-rounding (seed 601111, series A->B->C->D with agitator power): the cold
    # state's C_A came out as -3.3e-30 mol/m3 (Newton in linear concentrations at the rounding of a feed scale
    # of 140 mol/m3). Reference: the same three states, C_A = 0 to rounding; never a negative concentration
    sc, ref, p = load("negative-concentration-rounding")
    assert_same_states(sc, ref, p["tau"], p["T_in"])
    got = steady_states(sc, p["tau"], p["T_in"])
    want = ref.states(p["tau"], p["T_in"])
    for a, b in zip(got.states, want, strict=True):
        assert np.max(np.abs(np.array(a.C) - np.array(b.C))) <= 1e-9 * max(sc.c_in)


def assert_map_warns_nothing_and_agrees(name: str) -> None:
    """The finding's 16 x 12 map under warnings-as-errors, and three cells of one column against the reference."""
    sc, ref, p = load(name)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        mp = operating_map(sc, tau_range=tuple(p["tau_range"]), T_in_range=tuple(p["T_in_range"]), points=(16, 12))
    j = 5
    for i in (0, 6, 11):
        want = ref.states(float(mp.tau[j]), float(mp.T_in[i]))
        assert KEYS[int(mp.region[i, j])] == ref.region(want) and int(mp.state_count[i, j]) == len(want)


def test_map_warning_in_cusp_search():
    # finding map-warning-in-cusp-search (seed 701285, parallel + 2A->D with heat loss): the cusp search of the
    # map's boundaries evaluates the manifold at extreme points whose isothermal solve overflows; a numpy
    # RuntimeWarning escaped (an error under the suite's policy) instead of the point being marked unconverged.
    # Reference: 36 compared cells of this map agree (all `runaway`)
    assert_map_warns_nothing_and_agrees("map-warning-in-cusp-search")


def test_multiple_flushing_eigenvalue():
    # finding multiple-flushing-eigenvalue (seed 702386, adiabatic series A->B->C->D): -1/tau is a double
    # eigenvalue (one reaction invariant, and T - J . xi without heat exchange); a multiple eigenvalue has no
    # individual condition number, so the error bound called its sign unknown and the answer said "cannot be
    # resolved". Reference: one stable state (383.303982 K), and three (stable, saddle, stable) at the second
    # point; 60-digit eigenvalues (mpmath) of the first: -1.906e13, -6137.44, -8.305, -1.9362e-4 (twice)
    sc, ref, p = load("multiple-flushing-eigenvalue")
    assert_same_states(sc, ref, p["tau"], p["T_in"])
    assert_same_states(sc, ref, p["tau_b"], p["T_in_b"])


@pytest.mark.parametrize("name", ["hopf-at-stiff-point", "hopf-at-stiff-point-b"])
def test_hopf_at_stiff_point(name):
    # finding 22 hopf-at-stiff-point (s3-diff's run 707000-708999, seeds 707585 A+B->P, P->D with jacket and
    # agitator, and 707963 series with jacket, heat loss, agitator): on the feed-temperature branch a complex
    # pair crosses the axis at a stiff point; exactly at the crossing the Hopf function is NaN (a sign below the
    # rounding), Brent's method stopped on it, and the branch listed no Hopf point (success false). Reference:
    # one Hopf point in the range (bialternate test, compared to compare.py's tolerances); both codes' steady
    # states 0.05 K either side have the leading pair's real part +-9.3e-5 1/s (707585)
    from exomap.core.branch import branch
    from reference.solver import Column

    sc, ref, p = load(name)
    col = Column(ref, p["tau"], *ref.temperature_window(p["lo"], p["hi"], p["tau"]))
    want = [h for h in col.hopfs if p["lo"] < h.T_in < p["hi"]]
    assert len(want) == 1
    got = branch(sc, "feed_temperature", tau=p["tau"], lo=p["lo"], hi=p["hi"])
    assert got.success, got.message
    assert len(got.hopf_points) == 1
    h = got.hopf_points[0]
    assert h.T_in == pytest.approx(want[0].T_in, abs=1e-5) and h.T == pytest.approx(want[0].T, abs=1e-4)
    assert h.frequency == pytest.approx(want[0].frequency, rel=1e-4)


def test_frozen_state_below_window_floor():
    # finding frozen-state-below-window-floor (seed 715015, A+B->P, P->D, adiabatic; a feed at 30.53 K): every
    # temperature window started at 50 K at the lowest, so the frozen state (the rate ~1e-56 1/s at 30 K: the
    # energy balance puts it at the feed temperature to far below 1e-12 K) was never looked for, and the answer
    # said success with two states. Reference: three states, 30.5338207450163 (stable), 347.3077041450 (saddle),
    # 424.2040893921 K (stable)
    sc, ref, p = load("frozen-state-below-window-floor")
    assert_same_states(sc, ref, p["tau"], p["T_in"])
    got = steady_states(sc, p["tau"], p["T_in"])
    assert abs(got.states[0].T - p["T_in"]) < 1e-9


def test_lone_imaginary_rounding():
    # finding 25 lone-imaginary-rounding (seed 707462, series A->B->C->D; s3-diff's third run): the stiff split's
    # complex fixed-point iteration left imaginary parts of 1e-19 (below their errors, with no conjugate partner)
    # on real eigenvalues, and the oscillatory flag was called unresolved ("complete answer says no success"). A
    # real matrix's complex eigenvalues come in conjugate pairs. Reference: three states (stable, saddle, stable),
    # all real eigenvalues, and a complete answer
    sc, ref, p = load("lone-imaginary-rounding")
    assert_same_states(sc, ref, p["tau"], p["T_in"])
    got = steady_states(sc, p["tau"], p["T_in"])
    assert [s.oscillatory for s in got.states] == [s.oscillatory for s in ref.states(p["tau"], p["T_in"])]


def test_cusp_grid_overflow():
    # finding cusp-grid-overflow (seed 716069, series A->B->C->D with agitator; the lead's run of session s3): the
    # cusp search's 257-point grid reached points whose evaluation overflows, and the parabola through three of
    # them took inf - inf (a RuntimeWarning, an error under the suite's policy). Reference: the compared cells
    # of this map agree
    assert_map_warns_nothing_and_agrees("cusp-grid-overflow")


def test_intermediate_below_log_floor():
    # finding intermediate-below-log-floor (seed 718531, series A->B->C, jacket, agitator; a feed at 7.46 K): the
    # temperature window reaches down to 5.46 K, where the intermediate B is made by a frozen reaction at
    # ln C ~ -1450. The isothermal solve bounded ln C at -740 (and its inflow at 1e-300) and started from
    # ln(feed) - 12, so 853 samples below ~18.5 K never converged and the answer said "incomplete" beside five
    # correct states. Reference: five states, 261.5130416300 (stable), 296.0467252730 (saddle), 357.9303265736
    # (stable), 368.9633031534 (saddle), 379.1960871306 K (unstable), and a complete answer
    sc, ref, p = load("intermediate-below-log-floor")
    assert_same_states(sc, ref, p["tau"], p["T_in"])
    # the cold samples themselves converge, and put B where the frozen chain does: C_B = tau r_1(C_A) to first
    # order (r_2 and the outflow's share of A are ~1e-600 and ~1e-630 of it)
    from exomap.core.manifold import Manifold

    mf = Manifold(sc)
    T = np.array([5.5, 10.0, 18.0])
    y, lr, ok = mf.isothermal(np.full(3, p["tau"]), T)
    assert ok.all()
    ln_CB = np.log(p["tau"]) + np.log(sc.k0[0]) - sc.Ea[0] / (8.314462618 * T) + sc.orders[0, 0] * y[:, 0]
    assert np.allclose(y[:, 1], ln_CB, rtol=0, atol=1e-9)
    assert np.allclose(np.exp(y[:, 0]), sc.c_in[0], rtol=1e-12)


def test_hot_state_excess_reactant():
    # finding hot-state-excess-reactant (seed 715507, A+B->P, P->D, adiabatic, A fed in excess): at hot
    # temperatures the isothermal solve from the feed took A and B down together (their balances' Jacobian is
    # nearly singular along A - B) and stalled with both near 1e-19, where the answer keeps A at its excess
    # (152.2 mol/m^3) and B at ~1e-40; the hot state was lost ("a root ... could not be refined", 0 states).
    # The reference solver had the same trouble from its own start (it could not check the seed until it gained
    # continuation in T). Reference: one state at 631.0889983988516 K. Its eigenvalues span 1e40 (B is consumed
    # at -9.5e35 1/s), beyond what the reference's plain eigenvalue solve resolves (it says saddle, and the
    # differential check skips that class as ill-conditioned); the check value for the class is the Jacobian's
    # eigenvalues at the state converged in 60-digit arithmetic (mpmath): -1/tau three times, -378.376837919315,
    # -9.48038519842111e35 1/s, stable
    from test_stiff_stability import _state_60_digits

    sc, ref, p = load("hot-state-excess-reactant")
    want = ref.states(p["tau"], p["T_in"])
    got = steady_states(sc, p["tau"], p["T_in"])
    assert got.success and len(got.states) == len(want) == 1
    assert got.states[0].T == pytest.approx(want[0].T, abs=1e-9)
    doc = json.loads((FINDINGS / "hot-state-excess-reactant.json").read_text(encoding="utf-8"))["scenario"]
    x, J = _state_60_digits(doc, p["tau"], p["T_in"], list(got.states[0].C) + [got.states[0].T])
    import mpmath

    with mpmath.workdps(60):
        exact = np.array([complex(e) for e in mpmath.eig(J, left=False, right=False)])
    assert abs(float(x[-1]) - got.states[0].T) < 1e-9
    assert np.all(exact.real < 0) and got.states[0].stability == "stable"
    slow = np.sort(exact.real)[-4:]  # the three flushing modes and the reaction's slow mode
    assert np.allclose(np.sort(np.array(got.states[0].eigenvalues).real)[-4:], slow, rtol=1e-9, atol=0)
    A0, B0 = sc.c_in[0], sc.c_in[1]
    # the excess of A over B passes through (A - B is a reaction invariant), to the rounding of the feed
    assert got.states[0].C[0] - got.states[0].C[1] == pytest.approx(A0 - B0, rel=1e-12)
    # the samples of a hot column converge from the feed (continuation in the residence time where Newton stalls)
    from exomap.core.manifold import Manifold

    T = np.linspace(540.0, 686.0, 9)
    y, _, ok = Manifold(sc).isothermal(np.full(T.shape, p["tau"]), T)
    assert ok.all()
    assert np.allclose(np.exp(y[:, 0]), A0 - B0, rtol=1e-9)


def test_frozen_mode_beside_flushing():
    # finding frozen-mode-beside-flushing (seed 715507, as above; the harness's point between two folds, a feed
    # at 121.8 K): the frozen reaction's eigenvalue lies within 1e-50 of -1/tau, where three flushing eigenvalues
    # are exact; its imaginary part of 2e-51 found the exact ones as "partners" and the oscillatory flag was called
    # unresolved. An exactly real eigenvalue is no one's conjugate. Reference: three states, all real eigenvalues
    # (stable, saddle, stable), a complete answer
    sc, ref, p = load("frozen-mode-beside-flushing")
    assert_same_states(sc, ref, p["tau"], p["T_in"])
    got = steady_states(sc, p["tau"], p["T_in"])
    assert [s.oscillatory for s in got.states] == [s.oscillatory for s in ref.states(p["tau"], p["T_in"])]
