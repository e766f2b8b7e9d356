"""Stability of stiff steady states (issue 9, finding stiff-stability-threshold).

A fast reaction puts eigenvalues of 1e6..1e32 1/s next to the slow ones (1e-5..1e-3 1/s) that decide stability.
``steady.classify`` judges each real part by its sign against that eigenvalue's own rounding error, and
``steady.eigenvalues_with_errors`` takes the slow eigenvalues from the Schur complement of the fast variables.
The check values are the eigenvalues of the same matrices computed by mpmath in 60-digit arithmetic (an
independent general-purpose library, where rounding cannot hide a sign).
"""

from __future__ import annotations

import json
from pathlib import Path

import mpmath
import numpy as np
import pytest
from exomap.core.eigen import classify, eigenvalues_with_errors
from exomap.core.model import Model, nominal_inputs
from exomap.core.steady import steady_states
from exomap.schema import parse_scenario

FINDINGS = Path(__file__).resolve().parents[1] / "reference" / "findings"


def _exact_eigenvalues(J: np.ndarray) -> np.ndarray:
    with mpmath.workdps(60):
        ev = mpmath.eig(mpmath.matrix(J.tolist()), left=False, right=False)
        return np.array([complex(e) for e in ev])


def _state_jacobians(name: str):
    rec = json.loads((FINDINGS / f"{name}.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    res = steady_states(sc, p["tau"], p["T_in"])
    model = Model(sc)
    u = nominal_inputs(sc, tau=p["tau"], T_in=p["T_in"])
    for st in res.states:
        y = model.pack(sc.vessel.h_set, np.array(st.C), st.T, 0.0)
        yield p["tau"], st, model.reactor_block(y, u)


def _match(got: np.ndarray, want: np.ndarray) -> np.ndarray:
    """For each exact eigenvalue, the computed one closest to it."""
    return np.array([got[np.argmin(np.abs(got - w))] for w in want])


@pytest.mark.parametrize("name", ["stiff-stability-threshold", "singular-isothermal-jacobian", "hot-state-lost-2A"])
def test_stiff_eigenvalues_against_60_digits(name):
    for tau, st, J in _state_jacobians(name):
        ev, err = eigenvalues_with_errors(J, slow_rate=1.0 / tau)
        exact = _exact_eigenvalues(J)
        near = _match(ev, exact)
        errs = np.array([err[np.argmin(np.abs(ev - w))] for w in exact])
        # every eigenvalue within its own error estimate (plus 1e-9 relative) of the 60-digit value
        assert np.all(np.abs(near - exact) <= errs + 1e-9 * np.abs(exact))
        # and the slow ones (|lambda| tau < 1e3) to 1e-9 relative: their signs are read off these
        slow = np.abs(exact) * tau < 1e3
        assert np.all(np.abs(near[slow] - exact[slow]) <= 1e-9 * np.abs(exact[slow]))
        kind, osc, resolved = classify(exact)
        assert resolved and (kind, osc) == (st.stability, st.oscillatory)


def test_growing_oscillation_next_to_fast_reaction_is_unstable():
    # seed 400021 at T = 424.073 K: leading pair 5.476e-5 +- 1.118e-3 i 1/s beside -1.34e6 1/s (60 digits)
    states = [s for tau, s, J in _state_jacobians("stiff-stability-threshold") if abs(s.T - 424.0730215) < 1e-6]
    assert len(states) == 1 and states[0].stability == "unstable" and states[0].oscillatory


def test_sign_within_rounding_is_not_resolved():
    # a real part below its own error has no sign: the class is not resolved, whichever way it is rounded
    ev = np.array([-1e6 + 0j, 1e-12 + 1e-3j, 1e-12 - 1e-3j])
    kind, osc, resolved = classify(ev, np.array([1e-9, 1e-9, 1e-9]))
    assert not resolved and osc
    # the same pair with an error below its real part is resolved: a growing oscillation
    assert classify(ev, np.array([1e-9, 1e-13, 1e-13])) == ("unstable", True, True)
    # a sign that does not change the class leaves it resolved: two sure positive real parts are unstable
    # whatever a third unsure one is
    assert classify(np.array([1.0, 2.0, 1e-15]), np.array([1e-12] * 3))[0::2] == ("unstable", True)


def test_unresolved_state_is_not_success(monkeypatch):
    # a state whose stability the rounding hides makes the answer not a success, and the message says which
    import exomap.core.steady as steady_mod

    rec = json.loads((FINDINGS / "stiff-stability-threshold.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    real = steady_mod.eigenvalues_with_errors

    def blurred(J, slow_rate=None):
        ev, err = real(J, slow_rate)
        return ev, np.maximum(err, 1.0)  # every error above every slow real part

    monkeypatch.setattr(steady_mod, "eigenvalues_with_errors", blurred)
    res = steady_states(sc, p["tau"], p["T_in"])
    assert res.states and not res.success and "cannot be resolved" in res.message


def test_batched_stiff_eigenvalues_against_60_digits():
    # the map's and branches' vectorised path, on the reduced Jacobians (coordinates xi, theta = T - J . xi) of
    # the feed-temperature branch of finding branch-bracket-crash: a second reaction 1e24..1e31 times faster
    # than the residence time. The whole-matrix eigenvalues there put the leading one at +1618 1/s (rounding);
    # 60 digits give -9.08e-5 1/s.
    from exomap.core.eigen import eigenvalues_with_errors_batched
    from exomap.core.manifold import Manifold

    rec = json.loads((FINDINGS / "branch-bracket-crash.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    mf = Manifold(sc)
    tau = p["tau"]
    T = np.array([342.69, 477.28, 520.62, 565.72, 599.93, 613.80])
    e = mf.general_eval(np.full(T.shape, tau), T)
    Jt = mf.theta_jacobians(np.full(T.shape, tau), T, e.C)
    ev, err = eigenvalues_with_errors_batched(Jt, np.full(T.shape, 1.0 / tau))
    for k in range(T.size):
        exact = _exact_eigenvalues(Jt[k])
        for w in exact:
            i = int(np.argmin(np.abs(ev[k] - w)))
            assert abs(ev[k, i] - w) <= err[k, i] + 1e-12 * abs(w)
            if abs(w) * tau < 1e3:  # a slow eigenvalue: its sign is resolved
                assert abs(w.real) > err[k, i]
        # the first-order complement (no fixed-point iteration here) is within its error bound above; at these
        # points that is 2e-8 relative
        assert np.max(ev[k].real) == pytest.approx(np.max(exact.real), rel=1e-6)
