"""The full dynamic model of DESIGN.md §2: right-hand side and analytic Jacobian.

State vector ``y = [h, C_1 .. C_n, T, I]``: level [m], concentrations [mol/m^3], temperature [K] and, with a
PI level controller, the controller's integral of the level error [m s] (always present, inert for a fixed
valve, so the state layout never changes).

.. math::

    A \\dot h = q_{in} - q_{out}(h, x)

    V \\dot C_i = q_{in}(C_{i,in} - C_i) + V \\sum_j \\nu_{ij} r_j

    \\rho c_p V \\dot T = \\rho c_p q_{in}(T_{in} - T) + V \\sum_j (-\\Delta H_j) r_j
        - UA_{jacket}(T - T_c) - UA_{loss}(T - T_{amb}) + P_{agitator}

    r_j = k_{0,j} \\exp(-E_{a,j}/(R T)) \\prod_i C_i^{n_{ij}}

with V = A h. PI level control: x = clip(x_0 + K_c (e + I/T_i), 0, 1), e = h - h_set, and dI/dt = e except
while the output is clamped and the error would push it further (conditional integration, anti-windup).

Notes
-----
Constant density and heat capacity; perfect mixing; the jacket conductance UA does not change with level.
At constant density the level block is decoupled from the species and energy block at a fixed volume, so the
steady-state stability is that of the species+energy block (see ``exomap.core.steady``).

References
----------
[1] DESIGN.md §2 (the product contract of this project).
[2] IEC 60534-2-1:2011 for the valve equation (``exomap.core.valve``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from exomap.core import valve as valve_mod
from exomap.core.scenario import R_GAS, Scenario


@dataclass(frozen=True)
class Kinetics:
    """Arrays of a scenario's reactions, built once (``Kinetics.of(sc)``).

    nu (n, m), orders (m, n), k0 (m,), Ea (m,), J (m,) = -dH/(rho cp) [K m^3/mol].
    """

    nu: np.ndarray
    orders: np.ndarray
    k0: np.ndarray
    Ea: np.ndarray
    J: np.ndarray

    @classmethod
    def of(cls, sc: Scenario) -> Kinetics:
        return cls(sc.nu, sc.orders, sc.k0, sc.Ea, -sc.dH / (sc.rho * sc.cp))

    def rates(self, C: np.ndarray, T: float) -> np.ndarray:
        """Extent rates r_j [mol/(m^3 s)] at concentrations C [mol/m^3] and T [K]."""
        Cp = np.maximum(C, 0.0)
        k = self.k0 * np.exp(-self.Ea / (R_GAS * T))
        return k * np.prod(Cp[None, :] ** self.orders, axis=1)

    def rates_and_derivatives(self, C: np.ndarray, T: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(r (m,), dr/dC (m, n), dr/dT (m,))."""
        Cp = np.maximum(C, 0.0)
        r = self.rates(Cp, T)
        # dr_j/dC_i = n_ij r_j / C_i, written without dividing by zero: n C^(n-1) * prod_{k!=i} C_k^n
        m, n = self.orders.shape
        dr_dC = np.zeros((m, n))
        k = self.k0 * np.exp(-self.Ea / (R_GAS * T))
        for i in range(n):
            ni = self.orders[:, i]
            if not ni.any():
                continue
            others = np.prod(np.delete(Cp[None, :] ** self.orders, i, axis=1), axis=1)
            if Cp[i] > 0.0:
                own = ni * Cp[i] ** (ni - 1.0)
            else:
                # at C = 0 the slope of C^n is 0 (n > 1), 1 (n = 1) or infinite (0 < n < 1): cap the last so
                # Newton steps stay finite
                own = np.where(ni > 1.0, 0.0, np.where(ni == 1.0, 1.0, 1e12))
            own = np.where(ni == 0.0, 0.0, own)
            dr_dC[:, i] = k * own * others
        dr_dT = r * self.Ea / (R_GAS * T * T)
        return r, dr_dC, dr_dT


@dataclass(frozen=True)
class Inputs:
    """Everything outside the tank that drives it, in SI. Events in a simulation change these.

    Attributes
    ----------
    q_in : float  feed flow [m^3/s]
    T_in : float  feed temperature [K]
    c_in : tuple of float  feed concentrations [mol/m^3]
    T_c : float  coolant temperature [K]
    UA_jacket, UA_loss : float  [W/K]
    T_amb : float  [K]
    P_agitator : float  [W]
    opening : float or None  fixed valve opening [-]; None: the PI controller sets it
    bias : float  controller output at zero error and zero integral [-]
    h_set : float  level setpoint [m]
    outlet_blocked : bool  no outflow whatever the valve says
    """

    q_in: float
    T_in: float
    c_in: tuple[float, ...]
    T_c: float
    UA_jacket: float
    UA_loss: float
    T_amb: float
    P_agitator: float
    opening: float | None
    bias: float
    h_set: float
    outlet_blocked: bool = False
    extra: dict = field(default_factory=dict)


def nominal_inputs(
    sc: Scenario,
    *,
    tau: float | None = None,
    T_in: float | None = None,
    c_in: tuple[float, ...] | None = None,
    T_c: float | None = None,
    opening: float | None = None,
) -> Inputs:
    """Inputs at an operating point: q_in = V_set / tau. Unless ``opening`` is given, a fixed valve is set to
    (and a PI controller's output starts at) the opening that passes q_in at the set level, so a tank started
    at a steady state stays there (DESIGN.md §2); clamped to 0..1 when the valve cannot pass the flow."""
    q = sc.q_in if tau is None else sc.vessel.V_set / tau
    x_needed = valve_mod.opening_for_flow(sc, q)
    x_ss = float(np.clip(x_needed, 0.0, 1.0)) if np.isfinite(x_needed) else 1.0
    x0 = x_ss if opening is None else opening
    fixed = None if sc.valve.controlled else x0
    bias = x0
    return Inputs(
        q_in=q,
        T_in=sc.T_in if T_in is None else T_in,
        c_in=tuple(sc.c_in if c_in is None else c_in),
        T_c=sc.T_c if T_c is None else T_c,
        UA_jacket=sc.UA_jacket,
        UA_loss=sc.UA_loss,
        T_amb=sc.T_amb,
        P_agitator=sc.P_agitator,
        opening=fixed,
        bias=bias,
        h_set=sc.vessel.h_set,
    )


class Model:
    """Right-hand side and Jacobian of the full model for one scenario.

    >>> from exomap.core.scenario import Scenario  # doctest: +SKIP
    """

    def __init__(self, sc: Scenario) -> None:
        self.sc = sc
        self.kin = Kinetics.of(sc)
        self.n = sc.n_species
        self.A = sc.vessel.area
        self.rhocp = sc.rho * sc.cp
        self.size = self.n + 3  # h, C..., T, I

    # -- layout helpers ---------------------------------------------------------------------------------
    def pack(self, h: float, C: np.ndarray, T: float, I: float = 0.0) -> np.ndarray:
        return np.concatenate(([h], np.asarray(C, dtype=float), [T, I]))

    def unpack(self, y: np.ndarray) -> tuple[float, np.ndarray, float, float]:
        return float(y[0]), y[1 : 1 + self.n], float(y[1 + self.n]), float(y[2 + self.n])

    # -- valve ------------------------------------------------------------------------------------------
    def opening(self, y: np.ndarray, u: Inputs) -> tuple[float, float, float, bool]:
        """(x, dx/dh, dx/dI, integrating) for state y under inputs u."""
        if u.opening is not None:
            return float(np.clip(u.opening, 0.0, 1.0)), 0.0, 0.0, False
        h = float(y[0])
        I = float(y[2 + self.n])
        Kc = self.sc.valve.gain or 0.0
        Ti = self.sc.valve.reset_time or 1.0
        e = h - u.h_set
        raw = u.bias + Kc * (e + I / Ti)
        if raw >= 1.0:
            return 1.0, 0.0, 0.0, Kc * e < 0.0
        if raw <= 0.0:
            return 0.0, 0.0, 0.0, Kc * e > 0.0
        return raw, Kc, Kc / Ti, True

    def outflow(self, y: np.ndarray, u: Inputs) -> float:
        """q_out [m^3/s]."""
        if u.outlet_blocked:
            return 0.0
        x = self.opening(y, u)[0]
        return valve_mod.flow(self.sc, float(y[0]), x)

    # -- model ------------------------------------------------------------------------------------------
    def rhs(self, t: float, y: np.ndarray, u: Inputs, r: np.ndarray | None = None) -> np.ndarray:
        """dy/dt [SI per s]. ``r``: the extent rates at y when the caller has them already."""
        h, C, T, _ = self.unpack(y)
        V = self.A * max(h, 1e-12)
        x, _, _, integrating = self.opening(y, u)
        q_out = 0.0 if u.outlet_blocked else valve_mod.flow(self.sc, h, x)
        if r is None:
            r = self.kin.rates(C, T)
        c_in = np.asarray(u.c_in)
        dh = (u.q_in - q_out) / self.A
        dC = u.q_in / V * (c_in - C) + self.kin.nu @ r
        heat_out = u.UA_jacket * (T - u.T_c) + u.UA_loss * (T - u.T_amb) - u.P_agitator
        dT = u.q_in / V * (u.T_in - T) + self.kin.J @ r - heat_out / (self.rhocp * V)
        dI = (h - u.h_set) if integrating else 0.0
        return np.concatenate(([dh], dC, [dT, dI]))

    def jacobian(self, t: float, y: np.ndarray, u: Inputs) -> np.ndarray:
        """Analytic d(rhs)/dy, shape (n+3, n+3)."""
        n = self.n
        h, C, T, _ = self.unpack(y)
        hc = max(h, 1e-12)
        V = self.A * hc
        dVdh = self.A if h > 1e-12 else 0.0
        c_in = np.asarray(u.c_in)
        x, dx_dh, dx_dI, integrating = self.opening(y, u)
        if u.outlet_blocked:
            dq_dh = dq_dx = 0.0
        else:
            _, dq_dh, dq_dx = valve_mod.flow_derivatives(self.sc, h, x)
        _, dr_dC, dr_dT = self.kin.rates_and_derivatives(C, T)
        Jm = np.zeros((n + 3, n + 3))
        iT, iI = 1 + n, 2 + n
        # level
        Jm[0, 0] = -(dq_dh + dq_dx * dx_dh) / self.A
        Jm[0, iI] = -dq_dx * dx_dI / self.A
        # species
        Jm[1 : 1 + n, 0] = -u.q_in * (c_in - C) / (V * V) * dVdh
        Jm[1 : 1 + n, 1 : 1 + n] = -u.q_in / V * np.eye(n) + self.kin.nu @ dr_dC
        Jm[1 : 1 + n, iT] = self.kin.nu @ dr_dT
        # energy
        heat_out = u.UA_jacket * (T - u.T_c) + u.UA_loss * (T - u.T_amb) - u.P_agitator
        Jm[iT, 0] = (-u.q_in * (u.T_in - T) + heat_out / self.rhocp) / (V * V) * dVdh
        Jm[iT, 1 : 1 + n] = self.kin.J @ dr_dC
        Jm[iT, iT] = -u.q_in / V + self.kin.J @ dr_dT - (u.UA_jacket + u.UA_loss) / (self.rhocp * V)
        # controller integral
        if integrating:
            Jm[iI, 0] = 1.0
        return Jm

    def reactor_block(self, y: np.ndarray, u: Inputs) -> np.ndarray:
        """Jacobian of the species+energy block at fixed volume, shape (n+1, n+1): the matrix whose
        eigenvalues decide steady-state stability (DESIGN.md §2)."""
        return self.jacobian(0.0, y, u)[1 : 2 + self.n, 1 : 2 + self.n]
