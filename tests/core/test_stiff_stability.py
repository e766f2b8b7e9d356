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


def _state_60_digits(doc: dict, tau: float, T_in: float, start) -> tuple[list, mpmath.matrix]:
    """The steady state at (tau, T_in) converged by Newton's method in 60-digit arithmetic (mpmath) on the
    balances of DESIGN.md §2 written here from the reference's plain SI problem (tests/reference), from
    ``start`` (concentrations..., T), and the Jacobian of those balances there (mpmath's own differentiation)."""
    import sys

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from reference.scenarios import problem_from_doc
    from reference.solver import R

    pb = problem_from_doc(doc)
    mpf = mpmath.mpf
    with mpmath.workdps(60):
        tau_, T_in_, rc = mpf(tau), mpf(T_in), mpf(pb.rho) * mpf(pb.cp)
        kap, lam = mpf(pb.UA_jacket) / (rc * mpf(pb.V)), mpf(pb.UA_loss) / (rc * mpf(pb.V))
        p = mpf(pb.P_agitator) / (rc * mpf(pb.V))
        n = len(pb.species)

        def balances(*x):
            C, T = x[:n], x[n]
            r = []
            for rx in pb.reactions:
                k = mpf(rx.k0) * mpmath.exp(-mpf(rx.Ea) / (mpf(R) * T))
                for c, o in zip(C, rx.orders, strict=True):
                    k = k * c ** mpf(o) if o else k
                r.append(k)
            out = [
                (mpf(pb.c_in[i]) - C[i]) / tau_
                + sum(mpf(rx.nu[i]) * rj for rx, rj in zip(pb.reactions, r, strict=True))
                for i in range(n)
            ]
            heat = sum(-mpf(rx.dH) / rc * rj for rx, rj in zip(pb.reactions, r, strict=True))
            out.append((T_in_ - T) / tau_ + heat - kap * (T - mpf(pb.T_c)) - lam * (T - mpf(pb.T_amb)) + p)
            return out

        # Newton in (ln C, T): a concentration of 1e-31 next to 1e3 keeps its relative precision and its sign
        def in_logs(*z):
            return balances(*[mpmath.exp(v) for v in z[:n]], z[n])

        z = mpmath.matrix([mpmath.log(mpf(max(v, 1e-300))) for v in start[:n]] + [mpf(start[n])])
        for _ in range(60):
            dz = mpmath.lu_solve(mpmath.jacobian(in_logs, list(z)), mpmath.matrix(in_logs(*z)))
            z = z - dz
            if mpmath.norm(dz) <= mpf(10) ** -50 * mpmath.norm(z):
                break
        assert mpmath.norm(dz) <= mpf(10) ** -45 * mpmath.norm(z)
        x = mpmath.matrix([mpmath.exp(v) for v in z[:n]] + [z[n]])
        # every balance closes to 1e-45 of its largest term's scale (the feed over the residence time)
        assert mpmath.norm(mpmath.matrix(balances(*x))) < mpf(10) ** -45 * (1 + max(pb.c_in) / tau_ + T_in_ / tau_)
        return list(x), mpmath.jacobian(balances, list(x))


def test_oscillation_within_rounding():
    # finding 20 oscillation-within-rounding (seed 705044, series A->B->C, jacketed; s3-diff's 2,000-seed run):
    # the slow eigenvalues are a nearly defective cluster (-0.0034594 +- 4.17e-5 i and -0.0034835 1/s) beside
    # -1.23e6 1/s. The whole stiff matrix's first-order bound (2.8e-3 1/s) swallowed the imaginary part, so
    # steady_states said "not oscillatory" as a fact. Check value: the eigenvalues of the balances' Jacobian at
    # the state converged in 60-digit arithmetic (mpmath): a complex pair leads
    rec = json.loads((FINDINGS / "oscillation-within-rounding.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    res = steady_states(sc, p["tau"], p["T_in"])
    assert res.success and len(res.states) == 1
    st = res.states[0]
    x, J = _state_60_digits(rec["scenario"], p["tau"], p["T_in"], list(st.C) + [st.T])
    with mpmath.workdps(60):
        exact = np.array([complex(e) for e in mpmath.eig(J, left=False, right=False)])
        assert abs(float(x[-1]) - st.T) < 1e-9
    lead = exact[np.argmax(exact.real)]
    # 60 digits: -0.00345937840160898 +- 4.16771181258e-5 i 1/s leads, -0.00348349217309350 1/s next
    assert abs(lead.imag) == pytest.approx(4.16771181258e-5, rel=1e-10)
    kind, osc, resolved = classify(exact)
    assert (kind, osc, resolved) == ("stable", True, True)
    assert (st.stability, st.oscillatory) == (kind, osc)
    got = np.array(st.eigenvalues)
    slow = np.abs(exact) * p["tau"] < 1e3
    assert np.all(np.abs(_match(got, exact)[slow] - exact[slow]) <= 1e-9 * np.abs(exact[slow]))


def test_oscillation_below_rounding_is_not_resolved(monkeypatch):
    from exomap.core.eigen import oscillation_known

    # a pair whose imaginary part is within its error may be two real eigenvalues, and two real eigenvalues
    # within their errors of each other may be a pair: neither is a fact
    assert not oscillation_known(np.array([-1e-3 + 1e-9j, -1e-3 - 1e-9j, -1e6]), np.array([1e-8, 1e-8, 1e-9]))
    assert not oscillation_known(np.array([-1e-3 + 0j, -1.000001e-3, -1e6]), np.array([1e-8, 1e-8, 1e-9]))
    # a real and a complex eigenvalue whose real parts are within their errors: which leads is unknown
    assert not oscillation_known(np.array([-1e-3, -1.000001e-3 + 1e-4j, -1.000001e-3 - 1e-4j]), np.full(3, 1e-8))
    # resolved either way where the errors are small, and exactly known eigenvalues (no error) are real
    assert oscillation_known(np.array([-1e-3 + 1e-9j, -1e-3 - 1e-9j, -1e6]), np.array([1e-12, 1e-12, 1e-9]))
    assert oscillation_known(np.array([-1e-3 + 0j, -1.000001e-3, -1e6]), np.array([1e-12, 1e-12, 1e-9]))
    assert oscillation_known(np.array([-1e-3 + 0j, -1e-3 + 0j, -2.0]), np.array([0.0, 0.0, 1e-15]))
    # a tiny imaginary part with no partner near its conjugate is a real eigenvalue's rounding
    assert oscillation_known(np.array([3e-3 - 1e-19j, -1.6e-3 - 6e-20j, -3.5e3]), np.array([3e-18, 2e-18, 1e-12]))
    # steady_states then says so: not a success, and the message names the oscillation
    import exomap.core.steady as steady_mod

    rec = json.loads((FINDINGS / "oscillation-within-rounding.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    real = steady_mod.eigenvalues_with_errors

    def blurred(J, slow_rate=None):
        ev, err = real(J, slow_rate)
        slow = np.abs(ev) * p["tau"] < 1e3
        return ev, np.where(slow, 1e-4, err)  # above the pair's imaginary part, below every real part

    monkeypatch.setattr(steady_mod, "eigenvalues_with_errors", blurred)
    res = steady_states(sc, p["tau"], p["T_in"])
    assert res.states and res.states[0].stability == "stable" and not res.success
    assert "oscillate cannot be resolved" in res.message and "385.354 K" in res.message


def test_balancing_a_widely_scaled_matrix_warns_nothing():
    # a fast reaction's Jacobian needs balancing factors above 2^63; scipy's matrix_balance then warned "invalid
    # value encountered in cast" (casting the factors to integers with the permutation), about once per 1,000
    # bulk-run scenarios. Check value: the eigenvalues of [[a, b], [c, a]] are a +- sqrt(b c) (closed form), here
    # -1 +- 1
    import warnings

    J = np.array([[-1.0, 1e-60], [1e60, -1.0]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ev, err = eigenvalues_with_errors(J, slow_rate=1.0)
    assert np.allclose(np.sort(ev.real), [-2.0, 0.0], atol=1e-14) and np.all(ev.imag == 0)
    assert np.all(err < 1e-14)


def test_balance_cast_warning():
    # seed 706155 (series A->B->C->D; s3-diff, traced from the bulk runs' one scipy warning per ~1,000 seeds):
    # the hot states' Jacobians hold a fast reaction's 1e25..1e31 1/s beside 1e-3 1/s, and scipy's
    # matrix_balance warned there (see above). Now no warning, and every state's class is that of its Jacobian's
    # eigenvalues in 60-digit arithmetic (mpmath)
    import warnings

    rec = json.loads((FINDINGS / "balance-cast-warning.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    model = Model(sc)
    n_states = 0
    for tau, T_in in ((p["tau"], p["T_in"]), (p["tau_b"], p["T_in_b"])):
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            res = steady_states(sc, tau, T_in)
        assert res.success
        u = nominal_inputs(sc, tau=tau, T_in=T_in)
        for st in res.states:
            J = model.reactor_block(model.pack(sc.vessel.h_set, np.array(st.C), st.T, 0.0), u)
            kind, osc, resolved = classify(_exact_eigenvalues(J))
            assert resolved and (kind, osc) == (st.stability, st.oscillatory)
            n_states += 1
    assert n_states == 4  # 3 states at the first point (stable, saddle, stable), 1 at the second


def test_hot_state_single_point_solve():
    # finding 23 hot-state-single-point-solve (seed 707819, A+B->P, P->D with heat loss and agitator; s3-diff's run
    # 707000-708999): both reactions run 1e12 and 1e30 times faster than the flow in the hot state (C_A ~ 1e-31
    # mol/m3). The root refinement's single-point isothermal solve did not converge from the feed where the
    # vectorised one does, so steady_states lost the hot state (2 of 3 states, and 0 of 1 at the second point,
    # success false). Reference: the states' temperatures (tests/reference, 1e-6 K); their classes from the
    # Jacobian's eigenvalues at the state converged in 60 digits (mpmath): all real parts negative (the
    # reference's own double-precision class of the hot state, `saddle`, is rounding: +2^-7 beside -1.6e30 1/s)
    import sys

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from reference.scenarios import problem_from_doc
    from reference.solver import Reference

    rec = json.loads((FINDINGS / "hot-state-single-point-solve.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    ref = Reference(problem_from_doc(rec["scenario"]))
    for tau, T_in in ((p["tau"], p["T_in"]), (p["tau_b"], p["T_in_b"])):
        res = steady_states(sc, tau, T_in)
        want = ref.states(tau, T_in)
        assert res.success, res.message
        assert [s.T for s in res.states] == pytest.approx([s.T for s in want], abs=1e-6)
        hot = res.states[-1]
        assert hot.T > 650.0
        _, J = _state_60_digits(rec["scenario"], tau, T_in, list(hot.C) + [hot.T])
        with mpmath.workdps(60):
            exact = np.array([complex(e) for e in mpmath.eig(J, left=False, right=False)])
        assert np.all(exact.real < 0) and hot.stability == "stable"


def test_frozen_state_oscillation_is_decided():
    # finding 24 frozen-state-oscillation (seed 708195, series A->B->C with agitator; s3-diff's run 707000-708999):
    # at 145.6 K the reactions are frozen and every eigenvalue of J is -1/tau to 15 digits, so J's rounding cannot
    # tell a pair from two real eigenvalues and steady_states said "cannot be resolved". The eigenvalues of the
    # block without the flow term K = J + I/tau (built without it) decide it. Check value: K at the state
    # converged in 60 digits (mpmath), its eigenvalues at 60 digits: 0, -8.0e-47, 2.5e-37, 5.8e-32 1/s, all real
    rec = json.loads((FINDINGS / "frozen-state-oscillation.json").read_text(encoding="utf-8"))
    sc, p = parse_scenario(rec["scenario"]).to_core(), rec["point"]
    res = steady_states(sc, p["tau"], p["T_in"])
    assert res.success, res.message
    cold = res.states[0]
    _, J = _state_60_digits(rec["scenario"], p["tau"], p["T_in"], list(cold.C) + [cold.T])
    with mpmath.workdps(60):
        K = J + mpmath.eye(J.rows) / mpmath.mpf(p["tau"])
        exact = [complex(e) for e in mpmath.eig(K, left=False, right=False)]
    assert all(e.imag == 0.0 for e in exact) and max(abs(e) for e in exact) < 1e-30
    assert (cold.stability, cold.oscillatory) == ("stable", False)
