"""Shared fixtures of the core tests: small scenarios built straight from ``exomap.core.scenario`` dataclasses.

The central one is the dimensionless first-order CSTR of van Heerden [1] and Uppal, Ray & Poore [2],
realised through the dimensional scenario format: for a chosen feed temperature ``T_in`` the builder picks

* ``Ea = gamma * R * T_in``                       (Arrhenius number gamma = Ea / (R T_in)),
* ``-dH = B * T_in / gamma * rho * cp / c_Af``     (adiabatic rise dT_ad = B T_in / gamma),
* ``k0 = k_ref * exp(gamma)``                      (so that k(T_in) = k_ref and Da = tau * k_ref),
* ``UA = beta * rho * cp * V / tau``               (only where a cooling number beta is wanted at one tau).

In the dimensionless variables x = 1 - C_A/C_Af, y = gamma (T - T_in)/T_in and time t/tau, the balances are

    dx/dt' = -x + Da (1 - x) exp(y / (1 + y/gamma))
    dy/dt' = -(1 + beta) y + B Da (1 - x) exp(y / (1 + y/gamma)) + beta y_c

which is the model of [2] (their eqs. for the first-order irreversible exothermic reaction). The tests
compute everything about it themselves (roots, folds, Jacobians) and compare with what the core reports.

The fixtures are session scoped factories so that hypothesis tests can use them.

References
----------
[1] C. van Heerden, Autothermic processes, Ind. Eng. Chem. 45 (1953) 1242-1247.
[2] A. Uppal, W. H. Ray, A. B. Poore, On the dynamic behavior of continuous stirred tank reactors,
    Chem. Eng. Sci. 29 (1974) 967-985.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest
from exomap.core.scenario import R_GAS, Limits, MapSpec, Reaction, Scenario, Valve, Vessel

#: Liquid and vessel of every fixture (invented, water-like).
RHO = 1000.0  # kg/m^3
CP = 4000.0  # J/(kg K)
C_AF = 1000.0  # mol/m^3 (1 mol/L)
D_VESSEL = 1.2  # m
H_VESSEL = 2.0  # m
H_SET = 1.5  # m


def vessel() -> Vessel:
    return Vessel(D=D_VESSEL, H=H_VESSEL, h_set=H_SET, p_head=101325.0)


def volume() -> float:
    return math.pi * D_VESSEL**2 / 4.0 * H_SET


@dataclass(frozen=True)
class Cstr:
    """A dimensionless first-order CSTR realised as a dimensional scenario."""

    sc: Scenario
    gamma: float
    B: float
    T_in: float
    k_ref: float  # k(T_in) [1/s]
    kappa: float  # UA / (rho cp V) [1/s]

    @property
    def dT_ad(self) -> float:
        return self.B * self.T_in / self.gamma

    @property
    def E(self) -> float:
        """Activation temperature Ea/R [K]."""
        return self.gamma * self.T_in

    def tau(self, Da: float) -> float:
        """Residence time giving Damkoehler number Da = tau k(T_in) [s]."""
        return Da / self.k_ref

    def Da(self, tau: float) -> float:
        return tau * self.k_ref

    def beta(self, tau: float) -> float:
        return self.kappa * tau

    def T_of_y(self, y: float | np.ndarray) -> float | np.ndarray:
        return self.T_in * (1.0 + y / self.gamma)

    def k(self, T: float | np.ndarray) -> float | np.ndarray:
        """Rate constant k(T) [1/s], written relative to T_in so that it never overflows."""
        return self.k_ref * np.exp(self.E * (1.0 / self.T_in - 1.0 / np.asarray(T, dtype=float)))


def make_cstr(
    gamma: float = 20.0,
    B: float = 8.0,
    *,
    T_in: float = 350.0,
    k_ref: float = 1e-3,
    kappa: float = 0.0,
    T_c: float | None = None,
    T_max: float = 2000.0,
    product: bool = True,
    valve: Valve | None = None,
    map_spec: MapSpec | None = None,
) -> Cstr:
    """Adiabatic (kappa = 0) or jacketed first-order CSTR A -> P with the given gamma and B at T_in.

    ``kappa`` = UA/(rho cp V) [1/s]; the coolant sits at ``T_c`` (default: the feed temperature, y_c = 0).
    """
    Ea = gamma * R_GAS * T_in
    dT_ad = B * T_in / gamma
    dH = -dT_ad * RHO * CP / C_AF
    k0 = k_ref * math.exp(gamma)
    V = volume()
    species = ("A", "P") if product else ("A",)
    nu = (-1.0, 1.0) if product else (-1.0,)
    orders = (1.0, 0.0) if product else (1.0,)
    c_in = (C_AF, 0.0) if product else (C_AF,)
    sc = Scenario(
        species=species,
        rho=RHO,
        cp=CP,
        vessel=vessel(),
        valve=valve if valve is not None else Valve(Kv=40.0, opening=0.5),
        reactions=(Reaction("A -> P", nu, orders, k0, Ea, dH),),
        q_in=V / 1000.0,
        T_in=T_in,
        c_in=c_in,
        limits=Limits(T_max=T_max),
        UA_jacket=kappa * RHO * CP * V,
        T_c=T_in if T_c is None else T_c,
        map=map_spec,
        title="dimensionless first-order CSTR (test fixture)",
        description="Invented test data: a first-order exothermic reaction with chosen gamma and B.",
    )
    return Cstr(sc=sc, gamma=gamma, B=B, T_in=T_in, k_ref=k_ref, kappa=kappa)


def make_series(*, T_in: float = 280.0, UA: float = 0.0, T_c: float = 300.0, T_max: float = 2000.0) -> Scenario:
    """Two consecutive first-order exothermic reactions A -> P -> D (invented data).

    Adiabatic rises 120 K and 200 K; at tau = 1000 s the two S-shapes overlap for feed temperatures of about
    249..289 K, so there the tank has five steady states (the classic picture of consecutive reactions).
    """
    V = volume()
    r1 = Reaction("A -> P", (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0), 4.599e9, 80.0e3, -240.0e3)
    r2 = Reaction("P -> D", (0.0, -1.0, 1.0), (0.0, 1.0, 0.0), 2.578e14, 150.0e3, -400.0e3)
    return Scenario(
        species=("A", "P", "D"),
        rho=RHO,
        cp=CP,
        vessel=vessel(),
        valve=Valve(Kv=40.0, opening=0.5),
        reactions=(r1, r2),
        q_in=V / 1000.0,
        T_in=T_in,
        c_in=(2000.0, 0.0, 0.0),
        limits=Limits(T_max=T_max),
        UA_jacket=UA,
        T_c=T_c,
        title="series reactions A -> P -> D (test fixture)",
        description="Invented test data.",
    )


@pytest.fixture(scope="session")
def cstr():
    """Factory ``cstr(gamma, B, **options) -> Cstr`` (see ``make_cstr``)."""
    return make_cstr


@pytest.fixture(scope="session")
def series():
    """Factory of the two-reaction scenario A -> P -> D (see ``make_series``)."""
    return make_series


class Reference:
    """Independent calculations on the dimensionless first-order CSTR (no exomap code is used here).

    Steady state (with y_c = 0, i.e. coolant at the feed temperature):

        x = Da (1 - x) exp(y / (1 + y/gamma)),   y = B x / (1 + beta)

    so with B' = B/(1 + beta) the steady conversions are the roots in x of
    phi(x) = ln(x/(1-x)) - y/(1 + y/gamma) - ln Da, a smooth function of w = ln(x/(1-x)).
    """

    @staticmethod
    def y_of_x(x, B, beta=0.0):
        return B * np.asarray(x) / (1.0 + beta)

    @staticmethod
    def phi(w, Da, B, gamma, beta=0.0, yc=0.0):
        """phi(w) = w - y/(1 + y/gamma) - ln Da with x = 1/(1 + e^-w), y = (B x + beta y_c)/(1 + beta);
        its zeros are the steady states (the x balance divided by (1 - x), logarithm taken)."""
        x = 1.0 / (1.0 + np.exp(-w))
        y = (B * x + beta * yc) / (1.0 + beta)
        return w - y / (1.0 + y / gamma) - math.log(Da)

    @staticmethod
    def roots_x(Da, B, gamma, beta=0.0, yc=0.0, n=200_001):
        """Every steady conversion: dense scan in w = ln(x/(1-x)) over [-40, 40] and Brent's method."""
        from scipy.optimize import brentq

        def phi(w):
            return Reference.phi(w, Da, B, gamma, beta, yc)

        w = np.linspace(-40.0, 40.0, n)
        f = phi(w)
        roots = []
        for k in np.nonzero(np.sign(f[:-1]) * np.sign(f[1:]) < 0)[0]:
            wr = brentq(phi, w[k], w[k + 1], xtol=1e-15, rtol=1e-15, maxiter=500)
            roots.append(1.0 / (1.0 + math.exp(-wr)))
        return np.array(roots)

    @staticmethod
    def near_fold(Da, B, gamma, beta=0.0, yc=0.0, n=40_001, margin=1e-3):
        """True when a local extremum of phi on the scan lies within ``margin`` of zero: the point is within
        about ``margin`` in ln Da of a turning point, where a root count is ill-conditioned."""
        w = np.linspace(-40.0, 40.0, n)
        f = Reference.phi(w, Da, B, gamma, beta, yc)
        d = np.diff(f)
        ext = np.nonzero(np.sign(d[:-1]) * np.sign(d[1:]) < 0)[0] + 1
        return bool(ext.size and np.min(np.abs(f[ext])) < margin)

    @staticmethod
    def G(x, B, gamma, beta=0.0):
        """Da at which conversion x is a steady state: Da = x/(1-x) exp(-y/(1+y/gamma))."""
        y = B * x / (1.0 + beta)
        return x / (1.0 - x) * np.exp(-y / (1.0 + y / gamma))

    @staticmethod
    def fold_x(B, gamma, beta=0.0):
        """Conversions at the turning points, roots of (B' + B'^2/gamma^2) x^2 + (2B'/gamma - B') x + 1 = 0.

        Derivation (analytic): d ln G/dx = 1/(x(1-x)) - B'/(1 + B'x/gamma)^2 = 0
        <=> (1 + B'x/gamma)^2 = B' x (1-x). Empty when the discriminant is negative.
        """
        Bp = B / (1.0 + beta)
        a = Bp + Bp**2 / gamma**2
        b = 2.0 * Bp / gamma - Bp
        disc = b * b - 4.0 * a
        if disc <= 0:
            return np.array([])
        sq = math.sqrt(disc)
        return np.array([(-b - sq) / (2 * a), (-b + sq) / (2 * a)])

    @staticmethod
    def B_cusp(gamma):
        """Multiplicity threshold of the adiabatic case: the discriminant above vanishes at
        B (1 - 4/gamma) = 4, i.e. B = 4 gamma / (gamma - 4) (analytic; -> 4 as gamma -> infinity)."""
        return 4.0 * gamma / (gamma - 4.0)

    @staticmethod
    def jac2(x, y, Da, B, gamma, beta=0.0):
        """Jacobian of (dx/dt', dy/dt') in dimensionless time t' = t/tau at (x, y)."""
        s = 1.0 + y / gamma
        f = math.exp(y / s)
        fy = f / (s * s)
        return np.array(
            [
                [-1.0 - Da * f, Da * (1.0 - x) * fy],
                [-B * Da * f, -(1.0 + beta) + B * Da * (1.0 - x) * fy],
            ]
        )


@pytest.fixture(scope="session")
def ref():
    """The independent reference calculations (``Reference``)."""
    return Reference
