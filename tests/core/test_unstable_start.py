"""A simulation started on a steady state that is not stable must show the tank leaving it."""

from exomap.cli import load_scenario
from exomap.core.dynamics import UNSTABLE_NUDGE_K, simulate
from exomap.core.steady import steady_states


def test_a_start_on_an_unstable_focus_oscillates_away():
    sc = load_scenario("jacketed-first-order")
    tau = 90 * 60.0
    (state,) = steady_states(sc, tau, sc.T_in).states
    # the demo's description: an unstable focus at 90 min (linear stability: a complex pair with positive
    # real part, so any disturbance grows, analytic)
    assert state.stability == "unstable" and state.oscillatory
    r = simulate(sc, tau=tau, duration=8 * 3600.0)
    assert r.T[0] == state.T + UNSTABLE_NUDGE_K
    assert "not stable" in r.message
    # growth rate 2.3e-4 1/s (leading eigenvalue): a 0.1 K nudge grows past 10 K within 8 h
    assert r.T.max() - r.T.min() > 10.0


def test_a_stable_start_is_not_nudged():
    sc = load_scenario("jacketed-first-order")
    (state,) = steady_states(sc, sc.tau_nominal, sc.T_in).states
    assert state.stability == "stable"
    r = simulate(sc, duration=3600.0)
    assert r.T[0] == state.T
    assert r.message == "completed"
