"""The reference solver of the differential check, validated on its own against analytic results.

The reference (``tests/reference/solver.py``) must be right before it can judge exomap. Here it meets the
dimensionless first-order CSTR of van Heerden [1] and Uppal, Ray & Poore [2], realised with dimensional
numbers: with gamma = Ea/(R T_in), B = gamma dT_ad/T_in, Da = tau k(T_in), x = conversion, y = gamma (T -
T_in)/T_in and beta = UA tau/(rho cp V), the steady states of the adiabatic-or-cooled tank with the coolant at
the feed temperature are the roots of x = Da (1 - x) exp(y/(1 + y/gamma)), y = B x/(1 + beta) (analytic, from
the balances). Nothing of exomap is used.

References
----------
[1] C. van Heerden, Autothermic processes, Ind. Eng. Chem. 45 (1953) 1242-1247.
[2] A. Uppal, W. H. Ray, A. B. Poore, On the dynamic behavior of continuous stirred tank reactors,
    Chem. Eng. Sci. 29 (1974) 967-985.
[3] J. Guckenheimer, M. Myers, B. Sturmfels, Computing Hopf bifurcations I, SIAM J. Numer. Anal. 34 (1997) 1-21.
"""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from .scenarios import NETWORKS, random_case
from .solver import Column, Problem, R, Reaction, Reference, tau_branch_points

RHO, CP, C0, T_IN, K_REF = 1000.0, 4000.0, 1000.0, 350.0, 1e-3


def cstr(gamma: float, B: float, beta_at_tau: tuple[float, float] | None = None) -> Reference:
    """First-order A -> P with the given gamma and B at T_in = 350 K, k(T_in) = 1e-3 1/s, V = 1 m^3; with
    ``beta_at_tau = (beta, tau)`` a jacket of UA = beta rho cp V / tau with the coolant at the feed."""
    Ea = gamma * R * T_IN
    dH = -(B * T_IN / gamma) * RHO * CP / C0
    k0 = K_REF * math.exp(gamma)
    UA = 0.0 if beta_at_tau is None else beta_at_tau[0] * RHO * CP / beta_at_tau[1]
    pb = Problem(("A", "P"), (Reaction((-1.0, 1.0), (1.0, 0.0), k0, Ea, dH),), (C0, 0.0), RHO, CP, 1.0, UA, T_IN)
    return Reference(pb)


def fold_x(B: float, gamma: float, beta: float = 0.0) -> list[float]:
    """Conversions at the turning points (analytic): d ln Da/dx = 0 on Da(x) = x/(1-x) exp(-y/(1+y/gamma))
    with y = B' x, B' = B/(1 + beta), i.e. (B' + B'^2/gamma^2) x^2 + (2B'/gamma - B') x + 1 = 0."""
    Bp = B / (1.0 + beta)
    a, b = Bp + Bp**2 / gamma**2, 2.0 * Bp / gamma - Bp
    disc = b * b - 4.0 * a
    if disc <= 0:
        return []
    return [(-b - math.sqrt(disc)) / (2 * a), (-b + math.sqrt(disc)) / (2 * a)]


def Da_of_x(x: float, B: float, gamma: float, beta: float = 0.0) -> float:
    y = B * x / (1.0 + beta)
    return x / (1.0 - x) * math.exp(-y / (1.0 + y / gamma))


@pytest.mark.parametrize("gamma", [10.0, 20.0, 50.0])
def test_multiplicity_threshold(gamma):
    # analytic (the discriminant above): three states exist iff B > 4 gamma/(gamma - 4); for gamma -> infinity
    # this is the B > 4 of van Heerden [1] and Uppal, Ray & Poore [2] (from memory)
    B_c = 4.0 * gamma / (gamma - 4.0)
    above, below = cstr(gamma, 1.05 * B_c), cstr(gamma, 0.95 * B_c)
    xs = fold_x(1.05 * B_c, gamma)
    Da = math.sqrt(Da_of_x(xs[0], 1.05 * B_c, gamma) * Da_of_x(xs[1], 1.05 * B_c, gamma))
    assert len(above.states(Da / K_REF, T_IN)) == 3
    for Da_b in (0.01, Da, 1.0, 30.0):
        assert len(below.states(Da_b / K_REF, T_IN)) == 1


@pytest.mark.parametrize(("gamma", "B"), [(20.0, 8.0), (30.0, 12.0), (300.0, 6.0)])
def test_turning_points_along_residence_time_match_the_closed_form(gamma, B):
    ref = cstr(gamma, B)
    # analytic: the folds sit at Da(x_fold) for the roots x_fold of the quadratic in fold_x
    want = sorted(Da_of_x(x, B, gamma) for x in fold_x(B, gamma))
    folds, hopfs = tau_branch_points(ref, T_IN, want[0] / K_REF / 30, want[1] / K_REF * 30)
    got = sorted(f.tau * K_REF for f in folds)
    assert got == pytest.approx(want, rel=1e-9)
    # the low-Da fold is the extinction (high branch meets the middle one), the high-Da one the ignition
    assert [f.kind for f in sorted(folds, key=lambda f: f.tau)] == ["extinction", "ignition"]
    # adiabatic first order: no Hopf point (the 2x2 trace is negative wherever det > 0; analytic, [2])
    assert hopfs == []


def test_states_against_the_scalar_equation():
    gamma, B = 20.0, 8.0
    ref = cstr(gamma, B)
    for Da in (0.005, 0.03, 0.04, 0.05, 0.2, 5.0):
        # independent: roots of ln(x/(1-x)) - y/(1+y/gamma) - ln Da in w = ln(x/(1-x)) (dense scan, brentq)
        def phi(w, Da=Da):
            x = 1.0 / (1.0 + math.exp(-w))
            y = B * x
            return w - y / (1.0 + y / gamma) - math.log(Da)

        ws = np.linspace(-40, 40, 40001)
        fs = np.array([phi(w) for w in ws])
        roots = [brentq(phi, ws[k], ws[k + 1], xtol=1e-14) for k in np.nonzero(fs[:-1] * fs[1:] < 0)[0]]
        want_T = sorted(T_IN * (1.0 + B / (1.0 + math.exp(-w)) / gamma) for w in roots)
        got = ref.states(Da / K_REF, T_IN)
        assert [s.T for s in got] == pytest.approx(want_T, abs=1e-9)
        for s in got:
            assert s.residual < 1e-12
        # the middle state of three is a saddle, the outer ones are stable (adiabatic, [1])
        if len(got) == 3:
            assert [s.stability for s in got] == ["stable", "saddle", "stable"]


def test_hot_state_at_complete_conversion():
    # issue 9, defect 2: Ea = 200 kJ/mol, adiabatic rise 250 K, tau = 60 s, T_in = 420 K: the hot state has
    # 1 - X far below 1e-15. Independent: first order gives X = k tau/(1 + k tau) and T = T_in + dT_ad X,
    # so 1 - X = 1/(1 + k tau) and T solves T - T_in - dT_ad k tau/(1 + k tau) = 0 (analytic).
    Ea, dT_ad, k0 = 200e3, 250.0, 1e40
    pb = Problem(
        ("A", "P"), (Reaction((-1.0, 1.0), (1.0, 0.0), k0, Ea, -dT_ad * RHO * CP / C0),), (C0, 0.0), RHO, CP, 1.0
    )
    ref = Reference(pb)
    states = ref.states(60.0, 420.0)
    hot = states[-1]

    def g(T):
        kt = k0 * math.exp(-Ea / (R * T)) * 60.0
        return T - 420.0 - dT_ad * kt / (1.0 + kt)

    T_hot = brentq(g, 600.0, 680.0, xtol=1e-13)
    kt = k0 * math.exp(-Ea / (R * T_hot)) * 60.0
    assert hot.T == pytest.approx(T_hot, abs=1e-9)
    assert hot.C[0] == pytest.approx(C0 / (1.0 + kt), rel=1e-9)
    assert hot.C[0] < 1e-15 * C0
    assert hot.stable


def test_hopf_points_satisfy_the_trace_condition():
    # Uppal, Ray & Poore [2]: a Hopf point of the cooled first-order tank is where the trace of the Jacobian of
    # the (C_A, T) balances vanishes with a positive determinant; the eigenvalues there are +-i sqrt(det).
    # Hand-written here (analytic, from dC/dt = (C0 - C)/tau - k C, dT/dt = (T_in - T)/tau + J k C - kappa
    # (T - T_c)): [[-1/tau - k, -k' C], [J k, -1/tau + J k' C - kappa]] with k' = k Ea/(R T^2).
    gamma, B, beta, Da = 20.0, 30.0, 5.0, 0.1
    tau = Da / K_REF
    ref = cstr(gamma, B, (beta, tau))
    pb = ref.pb
    kappa = pb.UA_jacket / (RHO * CP * pb.V)
    J = -pb.reactions[0].dH / (RHO * CP)
    col = Column(ref, tau, *ref.temperature_window(200.0, 500.0, tau))
    assert col.hopfs, "this cooled tank has Hopf points along the feed temperature"
    for h in col.hopfs:
        s = min(col.states(h.T_in), key=lambda s_: abs(s_.T - h.T))
        k = pb.reactions[0].k0 * math.exp(-pb.reactions[0].Ea / (R * s.T))
        kp = k * pb.reactions[0].Ea / (R * s.T**2)
        C = s.C[0]
        jac = np.array([[-1 / tau - k, -kp * C], [J * k, -1 / tau + J * kp * C - kappa]])
        assert abs(np.trace(jac)) < 1e-7 * (1 / tau + k)
        assert np.linalg.det(jac) > 0
        assert h.frequency == pytest.approx(math.sqrt(np.linalg.det(jac)), rel=1e-6)


def test_jacobian_against_finite_differences():
    case = random_case(5)  # three reactions in series with heat loss
    ref = Reference(case.problem)
    tau, T = 700.0, 420.0
    e = ref.evaluate(tau, np.array([T]))
    C = e["C"][0]
    Jm = ref.jacobians(tau, e["u"], e["C"], np.array([T]), e["lnr"])[0]
    z0 = np.concatenate((C, [T]))
    num = np.zeros_like(Jm)
    for k in range(z0.size):
        h = 1e-6 * max(abs(z0[k]), 1e-3)
        zp, zm = z0.copy(), z0.copy()
        zp[k] += h
        zm[k] -= h
        num[:, k] = (ref.rhs(tau, 330.0, zp[:-1], zp[-1]) - ref.rhs(tau, 330.0, zm[:-1], zm[-1])) / (2 * h)
    assert np.allclose(Jm, num, rtol=1e-6, atol=1e-9 * np.max(np.abs(Jm)))


def test_bialternate_eigenvalues_are_pair_sums():
    # [3]: the eigenvalues of 2A (.) I are lambda_i + lambda_j, i < j
    rng = np.random.default_rng(1)
    A = rng.normal(size=(5, 5))
    ev = np.linalg.eigvals(A)
    want = sorted((ev[i] + ev[j] for i in range(5) for j in range(i)), key=lambda z: (round(z.real, 9), z.imag))
    got = sorted(np.linalg.eigvals(Reference.bialternate(A[None])[0]), key=lambda z: (round(z.real, 9), z.imag))
    assert np.allclose(got, want, atol=1e-9)


@pytest.mark.parametrize("seed", [3, 5, 11])
def test_states_are_where_the_dynamics_settle(seed):
    # a third way: integrating the dynamic balances from each stable state nudged by 0.5 K returns to it
    case = random_case(seed)
    ref = Reference(case.problem)
    tau, T_in = case.tau_nominal, case.T_in_nominal
    for s in ref.states(tau, T_in):
        assert s.residual < 1e-10
        if s.stable:
            C, T, settled = ref.integrate(tau, T_in, np.array(s.C), s.T + 0.5)
            assert settled
            assert T == pytest.approx(s.T, abs=1e-5)


def test_generator_spans_the_space():
    cases = [random_case(seed) for seed in range(150)]
    assert {c.network for c in cases} == {n for n, _, _ in NETWORKS}
    assert any(c.problem.UA_jacket > 0 for c in cases) and any(c.problem.UA_jacket == 0 for c in cases)
    assert any(c.problem.UA_loss > 0 for c in cases) and any(c.problem.P_agitator > 0 for c in cases)
    assert any(c.problem.c_in[0] == 0 for c in cases)  # a feed without the first reactant
    orders = [n for c in cases for r in c.problem.reactions for n in r.orders if n > 0]
    Eas = [r.Ea for c in cases for r in c.problem.reactions]
    assert 0.5 <= min(orders) and max(orders) <= 2.0
    assert 30e3 <= min(Eas) and max(Eas) <= 250e3
    rises = [Reference(c.problem).heat_release_bounds()[0] for c in cases[:60]]
    assert min(r for r in rises if r > 0) >= 5.0 * 0.999 and max(rises) <= 400.0 * 1.001


def test_solver_module_imports_nothing_of_exomap():
    # the reference must stay independent: import it in a fresh interpreter and look at what got loaded
    here = Path(__file__).resolve().parents[1]
    code = (
        f"import sys; sys.path.insert(0, {str(here)!r}); import reference.solver, reference.scenarios; "
        "print(any(m == 'exomap' or m.startswith('exomap.') for m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_folds_are_where_the_jacobian_is_singular():
    # a turning point found as an extremum of T_in(T) must be a zero eigenvalue of the full species + energy
    # Jacobian (det J = 0; analytic: the implicit-function theorem fails exactly there)
    case = random_case(53)  # series of three with agitator power: four folds on this column
    ref = Reference(case.problem)
    tau = 9798.548302774714
    col = Column(ref, tau, *ref.temperature_window(250.0, 345.0, tau))
    assert len(col.folds) == 4
    for f in col.folds:
        e = ref.evaluate(tau, np.array([f.T]))
        ev = ref.eig(tau, e["u"], e["C"], np.array([f.T]), e["lnr"])[0]
        assert np.min(np.abs(ev)) < 1e-7 * np.max(np.abs(ev))
        # and the states on either side of it in T_in: two on one side, none on the other (locally)
        n_at = [len([s for s in col.states(f.T_in + d) if abs(s.T - f.T) < 5.0]) for d in (-1e-3, 1e-3)]
        assert sorted(n_at) == [0, 2]


def test_isothermal_solve_with_an_excess_reactant_when_hot():
    # A + B -> P (orders 1/2, 1/2) with A in excess: at hot temperatures the answer keeps A at its excess and B
    # near 1e-40, and Newton from the upper bounds stalls with both near 1e-19 (seed 715507); the reference then
    # continues in T from the cooler answers. Check value: the scalar balance of B, with A = A0 - B0 + B (the
    # invariant A - B), solved by scipy's brentq in ln B: ln B0 - ln B = ln(1 + tau k sqrt(A/B))... written as
    # B + tau k sqrt(A B) = B0
    A0, B0, tau = 1294.0, 1142.0, 8000.0
    k0, Ea = 9.7e33, 212.6e3
    rx = Reaction((-1.0, -1.0, 1.0), (0.5, 0.5, 0.0), k0, Ea, -223e3)
    pb = Problem(("A", "B", "P"), (rx,), (A0, B0, 0.0), 1000.0, 3000.0, 1.0, 0.0, 300.0)
    ref = Reference(pb)
    T = np.linspace(300.0, 690.0, 400)
    e = ref.evaluate(tau, T)
    assert e["ok"].all()
    for i in (150, 250, 399):
        k = k0 * math.exp(-Ea / (R * T[i]))

        def f(lnB, k=k):
            B = math.exp(lnB)
            return math.log(B + tau * k * math.sqrt((A0 - B0 + B) * B)) - math.log(B0)

        lnB = brentq(f, -700.0, math.log(B0), xtol=1e-14, rtol=1e-15)
        assert math.log(e["C"][i, 1]) == pytest.approx(lnB, abs=1e-9)
        assert e["C"][i, 0] == pytest.approx(A0 - B0 + math.exp(lnB), rel=1e-12)
    assert e["C"][-1, 1] < 1e-30  # the hard end of the column was reached
