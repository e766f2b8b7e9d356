"""Outlet valve: IEC 60534-2-1 liquid flow (incompressible, turbulent, non-choked).

.. math:: q = N_1 K_v f(x) \\sqrt{\\Delta p / (\\rho/\\rho_0)}, \\qquad
          \\Delta p = p_{head} + \\rho g (h + z) - p_{down}

with :math:`N_1 = 1` for q in m^3/h and Δp in bar, i.e. in SI :math:`q = K_v/3600 \\, f(x)
\\sqrt{(\\Delta p / 10^5)/(\\rho/\\rho_0)}`. No back-flow: q = 0 when Δp <= 0.

References
----------
[1] IEC 60534-2-1:2011, Industrial-process control valves - Part 2-1: Flow capacity - Sizing equations for
    fluid flow under installed conditions, eq. (1) and Table 1 (N1).
[2] C. Bell et al., fluids: fluid dynamics component of Chemical Engineering Design Library, ``rho0`` and
    ``Cv_to_Kv`` (used as a cross-check in the tests).
"""

from __future__ import annotations

import numpy as np

from exomap.core.errors import ModelInputError
from exomap.core.scenario import EQUAL_PERCENTAGE, LINEAR, QUICK_OPENING, G, Scenario

#: Density of water at 15 degC, the reference of the relative density in IEC 60534-2-1 [kg/m^3]
#: (value as used by the fluids package, [2]).
RHO0 = 999.10329075702327
#: Kv [m^3/h] per Cv [US gal/min at 1 psi]: Kv = Cv / 1.156 (IEC 60534-1 Annex; equivalently fluids'
#: Cv_to_Kv, [2]). Computed from the unit definitions rather than rounded.
_GAL = 3.785411784e-3  # US gallon [m^3], exact by definition
_PSI = 6894.757293168361  # pound-force per square inch [Pa]
KV_PER_CV = _GAL * 60.0 * (1e5 / _PSI) ** 0.5


def cv_to_kv(cv: float) -> float:
    """Convert a Cv [US gal/min, 1 psi] to a Kv [m^3/h, 1 bar] (same relative density basis).

    >>> round(cv_to_kv(1.0), 4)
    0.8649
    """
    return cv * KV_PER_CV


def characteristic(x: np.ndarray | float, kind: str, rangeability: float) -> np.ndarray | float:
    """Inherent characteristic f(x) of the valve at relative opening x in 0..1 [-].

    linear: x; equal percentage: R^(x-1); quick opening: sqrt(x).
    """
    x = np.clip(x, 0.0, 1.0)
    if kind == LINEAR:
        return x
    if kind == EQUAL_PERCENTAGE:
        return rangeability ** (x - 1.0)
    if kind == QUICK_OPENING:
        return np.sqrt(x)
    raise ModelInputError(f"unknown valve characteristic {kind!r}", field="outlet_valve.characteristic")


def characteristic_slope(x: float, kind: str, rangeability: float) -> float:
    """df/dx [-] (for the Jacobian)."""
    x = min(max(x, 0.0), 1.0)
    if kind == LINEAR:
        return 1.0
    if kind == EQUAL_PERCENTAGE:
        return float(np.log(rangeability) * rangeability ** (x - 1.0))
    return 0.5 / np.sqrt(x) if x > 1e-12 else 0.5e6


def inverse_characteristic(f, kind: str, rangeability: float):
    """Opening x [-] giving f(x) = f (scalar or array); may fall outside 0..1 when the valve cannot pass
    the flow."""
    if kind == LINEAR:
        return f
    if kind == EQUAL_PERCENTAGE:
        with np.errstate(divide="ignore"):
            return 1.0 + np.log(np.maximum(f, 0.0)) / np.log(rangeability)
    return np.square(f)


def pressure_drop(sc: Scenario, h: float) -> float:
    """Δp across the valve at level h [Pa]."""
    return sc.vessel.p_head + sc.rho * G * (h + sc.valve.z_drop) - sc.valve.p_down


def flow(sc: Scenario, h: float, x: float) -> float:
    """Outlet flow q_out [m^3/s] at level h [m] and opening x [-]."""
    dp = pressure_drop(sc, h)
    if dp <= 0.0 or x <= 0.0:
        return 0.0
    f = float(characteristic(x, sc.valve.characteristic, sc.valve.rangeability))
    return sc.valve.Kv / 3600.0 * f * np.sqrt(dp / 1e5 / (sc.rho / RHO0))


def flow_derivatives(sc: Scenario, h: float, x: float) -> tuple[float, float, float]:
    """(q_out, dq/dh, dq/dx) at level h and opening x."""
    dp = pressure_drop(sc, h)
    if dp <= 0.0 or x <= 0.0:
        return 0.0, 0.0, 0.0
    c = sc.valve.Kv / 3600.0 / np.sqrt(1e5 * sc.rho / RHO0)
    f = float(characteristic(x, sc.valve.characteristic, sc.valve.rangeability))
    sq = np.sqrt(dp)
    q = c * f * sq
    dq_dh = c * f * 0.5 / sq * sc.rho * G
    dq_dx = c * sq * characteristic_slope(x, sc.valve.characteristic, sc.valve.rangeability) if x < 1.0 else 0.0
    return q, dq_dh, dq_dx


#: Words for an opening no valve can take (DESIGN.md §2 asks for the opening needed to pass the flow).
IN_RANGE, BELOW_RANGE, ABOVE_RANGE, NO_DRIVING_PRESSURE = (
    "in_range",
    "below_range",
    "above_range",
    "no_driving_pressure",
)


def opening_status(x: float) -> str:
    """Whether an opening from :func:`opening_for_flow` is one the valve can take: ``in_range`` (0..1),
    ``below_range`` (the flow is smaller than the valve passes at its smallest opening of its characteristic,
    e.g. 1/R of full flow for an equal-percentage valve: the inverse characteristic gives a negative
    opening), ``above_range`` (the valve is too small: more than fully open) or ``no_driving_pressure``."""
    if not np.isfinite(x):
        return NO_DRIVING_PRESSURE
    if x < 0.0:
        return BELOW_RANGE
    if x > 1.0:
        return ABOVE_RANGE
    return IN_RANGE


def reported_opening(x: float) -> float | None:
    """The opening as reported in answers: the number when the valve can take it (0..1), else None (the
    status word of :func:`opening_status` says why); never a negative or above-full opening."""
    return float(x) if opening_status(x) == IN_RANGE else None


def opening_for_flow(sc: Scenario, q, h: float | None = None):
    """Opening [-] that passes q [m^3/s] (scalar or array) at level h (default: the setpoint), from the
    inverse characteristic. May be > 1 (valve too small), < 0 (flow below what the characteristic passes at
    its smallest opening: equal percentage below 1/R of full flow), or nan when there is no driving pressure;
    answers report those through :func:`opening_status`, never as the number."""
    h = sc.vessel.h_set if h is None else h
    dp = pressure_drop(sc, h)
    if dp <= 0.0:
        return np.full(np.shape(q), np.nan) if np.ndim(q) else float("nan")
    f_needed = np.asarray(q, dtype=float) / (sc.valve.Kv / 3600.0 * np.sqrt(dp / 1e5 / (sc.rho / RHO0)))
    x = inverse_characteristic(f_needed, sc.valve.characteristic, sc.valve.rangeability)
    return x if np.ndim(q) else float(x)
