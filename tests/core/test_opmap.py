"""The operating map against point-by-point steady states, one-parameter branches and the CSTR cusp.

* Every demo scenario in ``scenarios/`` (loaded through the schema layer): on randomly drawn cells, and on
  randomly drawn cells next to a change of region (where a wrong map goes wrong first), the map's state count
  and region equal those of ``steady_states`` + ``region_of`` at that point.
* The map's ignition, extinction and Hopf curves at a residence time equal the turning and Hopf points of
  the branch along the feed temperature at that residence time (relative 1e-6); the max-temperature contour
  passes through states at exactly the maximum temperature.
* The cusp of the adiabatic first-order CSTR: the fold quadratic (``conftest.Reference.fold_x``) has a
  double root where B = 4 gamma/(gamma - 4) (analytic), which tends to van Heerden's B = 4 as
  gamma -> infinity [1, 2]. With B = dT_ad E/(R T_in^2) and gamma = E/(R T_in) at the cusp's feed
  temperature, B (gamma - 4) = 4 gamma gives 4 T_in^2 + 4 dT_ad T_in - dT_ad E/R = 0, so

      T_in,cusp = (sqrt(dT_ad^2 + dT_ad E/R) - dT_ad) / 2,   x_cusp = (1 - 2/gamma) / (2 (1 + B/gamma^2)),

  and tau_cusp = G(x_cusp)/k(T_in,cusp) (all analytic, derived here).

References
----------
[1] C. van Heerden, Autothermic processes, Ind. Eng. Chem. 45 (1953) 1242-1247.
[2] A. Uppal, W. H. Ray, A. B. Poore, On the dynamic behavior of continuous stirred tank reactors,
    Chem. Eng. Sci. 29 (1974) 967-985.
"""

from __future__ import annotations

import json
import math
import zlib
from pathlib import Path

import numpy as np
import pytest
from exomap.core.branch import branch
from exomap.core.errors import LimitExceededError, ModelInputError
from exomap.core.opmap import MAX_CELLS, MAX_POINTS, operating_map
from exomap.core.regions import CODE, REGION_KEYS, region_of
from exomap.core.steady import steady_states
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

SCENARIO_DIR = Path(__file__).resolve().parents[2] / "scenarios"
DEMOS = sorted(SCENARIO_DIR.glob("*.json"))


def _load(path: Path):
    from exomap.schema import parse_scenario

    return parse_scenario(json.loads(path.read_text())).to_core()


@pytest.fixture(scope="module", params=DEMOS, ids=[p.stem for p in DEMOS])
def demo(request):
    sc = _load(request.param)
    return request.param.stem, sc, operating_map(sc)


def test_there_are_demo_scenarios():
    # DESIGN.md §7: scenarios/ holds the demo scenarios; this file checks every one of them
    assert len(DEMOS) >= 3


# -- cells against steady_states + region_of --------------------------------------------------------------
def _ill_conditioned(sc, m, i, j, res) -> bool:
    """True where the classification of a cell is decided by a hair, so two correct methods may disagree:
    the cell's feed temperature within 1e-6 K of a fold at its residence time (a double root), a state within
    1e-6 K of the maximum temperature, a sensitivity within 1e-6 of its threshold, or a leading eigenvalue
    within 1e-9/tau of zero (a Hopf point)."""
    tau, T_in = m.tau[j], m.T_in[i]
    for key in ("ignition", "extinction"):
        rows = m.boundaries[key]
        at = rows[np.isclose(rows[:, 0], tau, rtol=1e-12)] if rows.size else rows
        if at.size and np.min(np.abs(at[:, 1] - T_in)) < 1e-6:
            return True
    for s in res.states:
        if abs(s.T - sc.limits.T_max) < 1e-6:
            return True
        if math.isfinite(s.sensitivity) and abs(abs(s.sensitivity) - sc.policy.sensitivity) < 1e-6:
            return True
        if abs(max(ev.real for ev in s.eigenvalues)) * tau < 1e-9:
            return True
    return False


def _cells(m, rng, n_random, n_edge):
    n_tin, n_tau = m.region.shape
    cells = [(int(rng.integers(n_tin)), int(rng.integers(n_tau))) for _ in range(n_random)]
    r = m.region.astype(int)
    edge = np.zeros(r.shape, dtype=bool)
    edge[:, :-1] |= r[:, :-1] != r[:, 1:]
    edge[:, 1:] |= r[:, :-1] != r[:, 1:]
    edge[:-1, :] |= r[:-1, :] != r[1:, :]
    edge[1:, :] |= r[:-1, :] != r[1:, :]
    edge |= m.state_count != np.roll(m.state_count, 1, axis=0)
    ii, jj = np.nonzero(edge)
    if ii.size:
        pick = rng.choice(ii.size, size=min(n_edge, ii.size), replace=False)
        cells += [(int(ii[k]), int(jj[k])) for k in pick]
    return cells


@pytest.mark.slow
def test_map_cells_agree_with_steady_states(demo):
    name, sc, m = demo
    assert m.success, m.message
    rng = np.random.default_rng(zlib.crc32(name.encode()))  # fixed per demo (str hash is salted)
    general = len(sc.reactions) > 1  # the general path's steady_states takes ~1.5 s a point
    cells = _cells(m, rng, 3 if general else 30, 3 if general else 30)
    skipped = 0
    for i, j in cells:
        res = steady_states(sc, float(m.tau[j]), float(m.T_in[i]))
        assert res.success, res.message
        if _ill_conditioned(sc, m, i, j, res):
            skipped += 1
            continue
        key = region_of(sc, res.states)
        # steady_states + region_of at the same point (DESIGN.md §5 rules)
        assert m.state_count[i, j] == len(res.states), (name, m.tau[j], m.T_in[i], [s.T for s in res.states])
        # steady_states + region_of at the same point (DESIGN.md §5 rules)
        assert REGION_KEYS[int(m.region[i, j])] == key, (name, m.tau[j], m.T_in[i])
        stable = [s.T for s in res.states if s.stable]
        if stable:
            # the hottest reachable state; the map reports it to 4 decimals (MapResult.to_dict), so 1e-4 K is
            # the precision it promises, next to folds too (the map keeps polishing states that still move;
            # measured ~1e-11 K on both paths)
            assert m.max_temperature[i, j] == pytest.approx(max(stable), abs=1e-4)
        else:
            # no reachable state: no hottest one (DESIGN.md §4, NaN where none)
            assert math.isnan(m.max_temperature[i, j])
    # the ill-conditioned cells are a small minority
    assert skipped <= len(cells) // 10


@pytest.mark.slow
@pytest.mark.parametrize("UA", [0.0, 3000.0])
def test_five_state_map_cells_agree_with_steady_states(series, UA):
    """A -> P -> D with up to five steady states (general path), adiabatic and jacketed."""
    sc = series(UA=UA, T_max=500.0)
    m = operating_map(sc, tau_range=(100.0, 1e4), T_in_range=(240.0, 320.0), points=(80, 60))
    # the window holds five-state cells (the fixture's design; fsolve confirms five at one point in
    # test_steady.py)
    assert np.any(m.state_count == 5)
    cells = _cells(m, np.random.default_rng(5), 12, 18)
    skipped = 0
    for i, j in cells:
        res = steady_states(sc, float(m.tau[j]), float(m.T_in[i]))
        if _ill_conditioned(sc, m, i, j, res):
            skipped += 1
            continue
        # steady_states + region_of at the same point (DESIGN.md §5 rules)
        assert m.state_count[i, j] == len(res.states), (m.tau[j], m.T_in[i], [s.T for s in res.states])
        # steady_states + region_of at the same point (DESIGN.md §5 rules)
        assert REGION_KEYS[int(m.region[i, j])] == region_of(sc, res.states), (m.tau[j], m.T_in[i])
    # the ill-conditioned cells are a small minority
    assert skipped <= len(cells) // 10


# -- boundaries against branches --------------------------------------------------------------------------
def _columns_with(rows, tau, k, rng):
    taus = np.unique(rows[:, 0]) if rows.size else np.array([])
    taus = taus[np.isin(taus, tau)]  # rows at the map's own columns (the cusp row may lie between columns)
    return rng.choice(taus, size=min(k, taus.size), replace=False) if taus.size else []


@pytest.mark.slow
def test_fold_boundaries_agree_with_branch_turning_points(demo):
    name, sc, m = demo
    rng = np.random.default_rng(7)
    folds = np.concatenate([m.boundaries["ignition"], m.boundaries["extinction"]])
    if folds.size == 0:
        # no fold in the window: check a branch agrees there is none, at three residence times
        for tau in m.tau[[0, m.tau.size // 2, -1]]:
            b = branch(sc, "feed_temperature", float(tau), float(m.T_in[0]), lo=float(m.T_in[0]), hi=float(m.T_in[-1]))
            # the branch at the same residence time has no turning point either
            assert b.turning_points == ()
        return
    columns = _columns_with(folds, m.tau, 3 if len(sc.reactions) > 1 else 6, rng)
    # fold rows at the map's own columns exist (else nothing below would be compared)
    assert len(columns) > 0
    for tau in columns:
        b = branch(sc, "feed_temperature", float(tau), float(m.T_in[0]), lo=float(m.T_in[0]), hi=float(m.T_in[-1]))
        for kind in ("ignition", "extinction"):
            rows = m.boundaries[kind]
            mine = np.sort(rows[rows[:, 0] == tau, 1])
            theirs = np.sort([t.T_in for t in b.turning_points if t.kind == kind])
            # as many folds of each kind as the branch at the same residence time
            assert mine.size == theirs.size, (name, kind, tau, mine, theirs)
            # the branch's turning points at the same residence time, relative 1e-6
            np.testing.assert_allclose(mine, theirs, rtol=1e-6)


@pytest.mark.slow
def test_hopf_boundary_agrees_with_branch_hopf_points(demo):
    name, sc, m = demo
    rows = m.boundaries["hopf"]
    if rows.size == 0:
        # no Hopf point in the window: a branch at three residence times agrees there is none
        for tau in m.tau[[0, m.tau.size // 2, -1]]:
            b = branch(sc, "feed_temperature", float(tau), float(m.T_in[0]), lo=float(m.T_in[0]), hi=float(m.T_in[-1]))
            # the branch at the same residence time has no Hopf point either
            assert b.hopf_points == (), (name, tau)
        return
    rng = np.random.default_rng(11)
    columns = _columns_with(rows, m.tau, 3 if len(sc.reactions) > 1 else 6, rng)
    # Hopf rows at the map's own columns exist (else nothing below would be compared)
    assert len(columns) > 0
    for tau in columns:
        b = branch(sc, "feed_temperature", float(tau), float(m.T_in[0]), lo=float(m.T_in[0]), hi=float(m.T_in[-1]))
        mine = np.sort(rows[rows[:, 0] == tau, 1])
        theirs = np.sort([h.T_in for h in b.hopf_points])
        # as many Hopf points as the branch at the same residence time
        assert mine.size == theirs.size, (name, tau, mine, theirs)
        # the branch's Hopf points at the same residence time, relative 1e-6
        np.testing.assert_allclose(mine, theirs, rtol=1e-6)


@pytest.mark.slow
def test_max_temperature_contour_sits_on_states_at_the_limit(demo):
    name, sc, m = demo
    rows = m.boundaries["max_temperature"]
    rows = rows[np.isfinite(rows[:, 0])]
    if rows.size == 0:
        # no contour: then no column may pass continuously through the limit, i.e. no two neighbouring
        # single-state cells of one column with the stable state below the limit in one and above in the other
        # (analytic: with one state its temperature is continuous in T_in, so it would cross T_max between them)
        below = np.isfinite(m.max_temperature) & (m.max_temperature <= sc.limits.T_max)
        above = m.region == CODE["runaway"]
        assert not np.any(below[:-1] & above[1:] & (m.state_count[:-1] == 1) & (m.state_count[1:] == 1)), name
        return
    rng = np.random.default_rng(3)
    for k in rng.choice(len(rows), size=min(3 if len(sc.reactions) > 1 else 8, len(rows)), replace=False):
        tau, T_in = rows[k]
        res = steady_states(sc, float(tau), float(T_in))
        # DESIGN.md §5: the contour is where a stable state sits exactly at the maximum temperature
        near = [s for s in res.states if abs(s.T - sc.limits.T_max) < 1e-6 * sc.limits.T_max]
        assert len(near) == 1, (name, tau, T_in, [s.T for s in res.states])
        # DESIGN.md §5: the contour is drawn where the state at the limit is stable
        assert near[0].stable


# -- whole grids against the dimensionless CSTR -----------------------------------------------------------
def _expected_cell(c, tau, T_in, T_c, T_max, ref):
    """(state count, region key) of one cell from the dimensionless equations alone, or None when the cell is
    ill-conditioned (within ~1e-3 in ln Da of a fold, a state within 1e-6 K of the limit, a sensitivity
    within 1e-6 of its threshold, or a trace within 1e-9 of zero)."""
    gamma = c.E / T_in
    B = c.dT_ad * gamma / T_in
    Da = tau * float(c.k(T_in))
    beta = c.kappa * tau
    yc = gamma * (T_c - T_in) / T_in
    if ref.near_fold(Da, B, gamma, beta, yc):
        return None
    states = []
    for x in ref.roots_x(Da, B, gamma, beta, yc, n=40_001):
        y = (B * x + beta * yc) / (1 + beta)
        T = T_in * (1 + y / gamma)
        J = ref.jac2(x, y, Da, B, gamma, beta)
        tr, det = np.trace(J), np.linalg.det(J)
        k = float(c.k(T))
        # analytic: dT_in/dT at fixed tau from T_in = (1 + kappa tau) T - dT_ad tau k/(1 + tau k) - kappa tau T_c
        dTin_dT = 1 + beta - c.dT_ad * tau * k * c.E / T**2 / (1 + tau * k) ** 2
        sens = 1 / dTin_dT
        if abs(T - T_max) < 1e-6 * T_max or abs(abs(sens) - 3.0) < 1e-6 or abs(tr) < 1e-9 or abs(det) < 1e-9:
            return None
        states.append((T, tr < 0 and det > 0, sens))
    stable = [st for st in states if st[1]]
    # DESIGN.md §5, in priority order
    if any(st[0] > T_max for st in stable):
        key = "runaway"
    elif not stable:
        key = "unstable"
    elif len(states) > 1:
        key = "multiple"
    elif abs(stable[0][2]) > 3.0:
        key = "sensitive"
    else:
        key = "stable"
    return len(states), key


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    gamma=st.floats(12.0, 40.0),
    B=st.floats(3.0, 20.0),
    beta=st.floats(0.0, 4.0),
    dT_c=st.floats(-15.0, 15.0),
    limit=st.floats(0.2, 1.2),
)
def test_whole_map_against_the_dimensionless_cstr(cstr, ref, gamma, B, beta, dT_c, limit):
    tau_ref = 100.0
    base = cstr(gamma, B)
    c = cstr(gamma, B, kappa=beta / tau_ref, T_c=base.T_in + dT_c, T_max=base.T_in + limit * base.dT_ad)
    m = operating_map(c.sc, tau_range=(0.1, 1e4), T_in_range=(base.T_in - 20.0, base.T_in + 20.0), points=(24, 16))
    assert m.success
    skipped = 0
    for i, T_in in enumerate(m.T_in):
        for j, tau in enumerate(m.tau):
            exp = _expected_cell(c, float(tau), float(T_in), c.sc.T_c, c.sc.limits.T_max, ref)
            if exp is None:
                skipped += 1
                continue
            # independent: roots of the dimensionless balance, 2x2 Jacobian, DESIGN.md §5 rules
            assert m.state_count[i, j] == exp[0], (tau, T_in)
            # independent: the region by DESIGN.md §5 from the dimensionless roots and 2x2 Jacobians
            assert REGION_KEYS[int(m.region[i, j])] == exp[1], (tau, T_in)
    # the ill-conditioned cells are a small minority
    assert skipped <= m.region.size // 10


# -- the cusp of the adiabatic first-order CSTR -----------------------------------------------------------
def _cusp_expected(c, ref):
    E, dT = c.E, c.dT_ad
    # analytic (module docstring): 4 T^2 + 4 dT_ad T - dT_ad E/R = 0
    T_in = (math.sqrt(dT * dT + dT * E) - dT) / 2.0
    gamma = E / T_in
    B = dT * gamma / T_in
    x = (1.0 - 2.0 / gamma) / (2.0 * (1.0 + B / gamma**2))
    # the fold quadratic has a double root there (analytic)
    assert ref.fold_x(B * (1 - 1e-9), gamma).size == 0
    # analytic: B at the cusp is 4 gamma/(gamma - 4)
    assert abs(B - ref.B_cusp(gamma)) < 1e-9 * B
    tau = float(ref.G(x, B, gamma)) / float(c.k(T_in))
    return tau, T_in, T_in + dT * x, gamma, B


@pytest.mark.parametrize(
    ("gamma", "B", "half_window"), [(20.0, 5.0, 30.0), (40.0, 40.0 / 9.0, 15.0), (500.0, 500.0 / 124.0, 1.0)]
)
def test_cusp_of_the_adiabatic_cstr(cstr, ref, gamma, B, half_window):
    # the fixture is built so that gamma and B at T_in = 350 K lie on the cusp line B = 4 gamma/(gamma - 4)
    c = cstr(gamma, B, T_in=350.0)
    tau_c, T_in_c, T_c, gamma_c, B_c = _cusp_expected(c, ref)
    m = operating_map(c.sc, tau_range=(tau_c / 10, tau_c * 10), T_in_range=(T_in_c - half_window, T_in_c + half_window))
    cusp = m.boundaries["cusp"]
    # analytic: the adiabatic first-order CSTR has exactly one cusp
    assert len(cusp) == 1, cusp
    # analytic (derived above), relative 1e-6
    assert cusp[0][0] == pytest.approx(tau_c, rel=1e-6)
    # analytic (module docstring), relative 1e-6
    assert cusp[0][1] == pytest.approx(T_in_c, rel=1e-6)
    # analytic (module docstring), relative 1e-6
    assert cusp[0][2] == pytest.approx(T_c, rel=1e-6)
    # van Heerden 1953; Uppal, Ray & Poore 1974: B -> 4 at the cusp as gamma -> infinity (here within 4/(gamma-4))
    B_map = c.dT_ad * c.E / cusp[0][1] ** 2
    assert abs(B_map - 4.0) <= 16.0 / (gamma_c - 4.0) * 1.001
    # ... and the cusp is where multiplicity starts: folds only on the cold side, one state on the hot side
    for key in ("ignition", "extinction"):
        rows = m.boundaries[key]
        # analytic: fold curves exist on the cold side of the cusp (B above the threshold there)
        assert len(rows) > 5
        # analytic: B = dT_ad E/(R T_in^2) falls below the threshold on the hot side: no fold there
        assert np.all(rows[:, 1] <= T_in_c * (1 + 1e-9))
    i_hot = np.searchsorted(m.T_in, T_in_c + 0.1 * half_window)
    # analytic: one steady state everywhere on the hot side of the cusp
    assert np.all(m.state_count[i_hot:] == 1)


def test_cusp_through_the_json_scenario_format(cstr, ref):
    """The same cusp with the scenario written as a JSON document in SI numbers and parsed by the schema."""
    from exomap.schema import parse_scenario

    c = cstr(20.0, 5.0, T_in=350.0)
    sc, rxn = c.sc, c.sc.reactions[0]
    doc = json.loads((DEMOS[0]).read_text())
    doc.update(
        species=["A", "P"],
        liquid={"density": sc.rho, "heat_capacity": sc.cp},
        reactions=[
            {
                "label": "A -> P",
                "stoichiometry": {"A": -1, "P": 1},
                "orders": {"A": 1},
                "pre_exponential": rxn.k0,
                "activation_energy": rxn.Ea,
                "reaction_enthalpy": rxn.dH,
            }
        ],
        feed={"flow": sc.q_in, "temperature": sc.T_in, "concentrations": {"A": sc.c_in[0]}},
        jacket=None,
        heat_loss=None,
    )
    doc.pop("agitator_power", None)
    doc["map"] = None
    parsed = parse_scenario(doc).to_core()
    # the JSON document has no jacket and no heat loss: adiabatic
    assert parsed.UA_jacket == 0.0 and parsed.UA_loss == 0.0
    tau_c, T_in_c, T_c, _, _ = _cusp_expected(c, ref)
    m = operating_map(parsed, tau_range=(tau_c / 10, tau_c * 10), T_in_range=(T_in_c - 30, T_in_c + 30))
    cusp = m.boundaries["cusp"]
    # analytic: exactly one cusp
    assert len(cusp) == 1
    # analytic (derived in the module docstring), relative 1e-6
    np.testing.assert_allclose(cusp[0], [tau_c, T_in_c, T_c], rtol=1e-6)


# -- the fixture's fold curves against the closed form ----------------------------------------------------
def test_fold_curves_of_the_adiabatic_cstr(cstr, ref):
    c = cstr(20.0, 8.0)
    m = operating_map(c.sc, tau_range=(5.0, 500.0), T_in_range=(300.0, 400.0), points=(120, 80))
    for key, pick in (("ignition", 0), ("extinction", 1)):
        rows = m.boundaries[key]
        rows = rows[np.isfinite(rows[:, 0])]
        # the window holds many fold points
        assert len(rows) > 20
        for tau, T_in in rows[:: max(1, len(rows) // 15)]:
            # analytic: at this feed temperature gamma and B follow, the folds are Da = G(x_-+) and
            # ignition is the lower-temperature fold x_-
            gamma = c.E / T_in
            B = c.dT_ad * gamma / T_in
            x = ref.fold_x(B, gamma)
            if x.size == 0:  # the cusp row itself (double root) is added to both curves
                # analytic: a row without a real fold root is the cusp, where B = 4 gamma/(gamma - 4)
                assert B == pytest.approx(ref.B_cusp(gamma), rel=1e-6)
                continue
            Da = float(ref.G(x[pick], B, gamma))
            assert tau * float(c.k(T_in)) == pytest.approx(Da, rel=1e-6)


# -- valve overlay ----------------------------------------------------------------------------------------
def test_valve_opening_and_overlay_follow_the_sizing_equation(cstr):
    c = cstr(20.0, 8.0)
    m = operating_map(c.sc, tau_range=(50.0, 5000.0), T_in_range=(300.0, 400.0), points=(60, 4))
    sc = c.sc
    dp = sc.vessel.p_head + sc.rho * 9.80665 * (sc.vessel.h_set + sc.valve.z_drop) - sc.valve.p_down
    q = sc.vessel.V_set / m.tau
    # IEC 60534-2-1 eq. (1), linear characteristic: x = q / (Kv sqrt(dp/1 bar / (rho/rho0))) with q in m^3/h;
    # rho0 = 999.1 kg/m^3 (water at 15 degC, from memory), hence rel 1e-4
    x = q * 3600.0 / (sc.valve.Kv * np.sqrt(dp / 1e5 / (sc.rho / 999.1)))
    np.testing.assert_allclose(m.valve_opening, x, rtol=1e-4)
    # DESIGN.md §2: usable range 20-80 % open (common practice), flagged outside it; away from the edges
    away = (np.abs(x - 0.2) > 1e-3) & (np.abs(x - 0.8) > 1e-3)
    assert np.any(x[away] < 0.2) and np.any((x[away] > 0.2) & (x[away] < 0.8))
    np.testing.assert_array_equal(np.asarray(m.valve_limited)[away], ((x < 0.2) | (x > 0.8))[away])


# -- answer shape and bad requests -------------------------------------------------------------------------
def test_map_answer_shape(cstr):
    c = cstr(20.0, 8.0)
    m = operating_map(c.sc, tau_range=(5.0, 500.0), T_in_range=(300.0, 400.0), points=(30, 20))
    doc = m.to_dict()
    # DESIGN.md §4: the map answer's keys, grids indexed [feed temperature][residence time]
    for key in (
        "residence_time_s",
        "feed_temperature_K",
        "region",
        "legend",
        "state_count",
        "max_temperature_K",
        "valve_limited",
        "boundaries",
    ):
        assert key in doc
    # DESIGN.md §4: the boundary curves
    assert set(doc["boundaries"]) >= {"ignition", "extinction", "hopf", "max_temperature"}
    # DESIGN.md §4: region indexed [feed temperature][residence time]
    assert len(doc["region"]) == 20 and all(len(row) == 30 for row in doc["region"])
    # DESIGN.md §5: the legend names every region key
    assert {e["key"] for e in doc["legend"]} == set(REGION_KEYS)
    # the codes of the brief: stable 0, sensitive 1, multiple 2, unstable 3, runaway 4
    assert [CODE[k] for k in ("stable", "sensitive", "multiple", "unstable", "runaway")] == [0, 1, 2, 3, 4]
    json.dumps(doc, allow_nan=False)
    lines = m.to_csv().strip().splitlines()
    # MapResult.to_csv: a header and one row per cell
    assert len(lines) == 1 + 30 * 20


def test_bad_map_requests(cstr):
    sc = cstr().sc
    with pytest.raises(ModelInputError, match="residence_time") as err:
        operating_map(sc, tau_range=(500.0, 5.0), T_in_range=(300.0, 400.0))
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "residence_time"
    with pytest.raises(ModelInputError, match="residence_time"):
        operating_map(sc, tau_range=(0.0, 5.0), T_in_range=(300.0, 400.0))
    with pytest.raises(ModelInputError, match="feed_temperature") as err:
        operating_map(sc, tau_range=(5.0, 500.0), T_in_range=(400.0, 300.0))
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "feed_temperature"
    with pytest.raises(ModelInputError, match="feed_temperature"):
        operating_map(sc, tau_range=(5.0, 500.0), T_in_range=(300.0, float("nan")))
    for points in ((0, 10), (10, 0), (1, 10)):
        with pytest.raises(ModelInputError, match="points") as err:
            operating_map(sc, tau_range=(5.0, 500.0), T_in_range=(300.0, 400.0), points=points)
        # DEVELOPERS.md: ModelInputError.field names the input
        assert err.value.field == "points"
    # documented limits: MAX_CELLS cells and MAX_POINTS per axis
    n = int(math.isqrt(MAX_CELLS)) + 1
    # core/opmap.py documents MAX_CELLS and MAX_POINTS; a square grid just over MAX_CELLS fits the axis limit
    assert n <= MAX_POINTS
    with pytest.raises(LimitExceededError, match="cells is more than the limit") as err:
        operating_map(sc, tau_range=(5.0, 500.0), T_in_range=(300.0, 400.0), points=(n, n))
    # DEVELOPERS.md: LimitExceededError.field names the input
    assert err.value.field == "points"
    with pytest.raises(LimitExceededError, match="per axis") as err:
        operating_map(sc, tau_range=(5.0, 500.0), T_in_range=(300.0, 400.0), points=(MAX_POINTS + 1, 2))
    # DEVELOPERS.md: LimitExceededError.field names the input
    assert err.value.field == "points"
    with pytest.raises(ModelInputError, match="spacing"):
        operating_map(sc, tau_range=(5.0, 500.0), T_in_range=(300.0, 400.0), spacing="cubic")
