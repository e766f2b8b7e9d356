"""Thermal-safety figures of an operating state: ΔT_ad, MTSR, TMRad, TD24 and a criticality class.

These are published screening methods and keep their published names:

* ΔT_ad, the adiabatic temperature rise of the feed: all the heat its reactants can release, with no heat
  removal, divided by ρ·cp.
* MTSR, the maximum temperature of the synthesis reaction: T_ss + ΔT_ad·(1 − X_ss), the temperature reached
  when the unconverted reactant in the tank reacts with no heat removal (feed and outlet stopped, cooling
  lost) (DESIGN.md §2, [2]).
* TMRad, the time to maximum rate under adiabatic conditions, by the zero-order approximation of Townsend and
  Tou [1].
* TD24, the temperature at which the TMRad of the decomposition is 24 h [2].
* The criticality class 1–5 of a scenario in the manner of Stoessel [2], from the process temperature, MTSR,
  the maximum technical temperature MTT (``limits.technical_limit_temperature``) and TD24.

References
----------
[1] D. I. Townsend, J. C. Tou, "Thermal hazard evaluation by an accelerating rate calorimeter",
    Thermochimica Acta 37 (1980) 1-30.
[2] F. Stoessel, Thermal Safety of Chemical Processes: Risk Assessment and Process Design, Wiley-VCH,
    Weinheim, 2008 (ch. 2 for ΔT_ad and TMRad, ch. 3 for MTSR, TD24 and the criticality classes).
[3] D. A. Frank-Kamenetskii, Diffusion and Heat Transfer in Chemical Kinetics, 2nd ed., Plenum, New York,
    1969 (the exponent approximation behind the zero-order adiabatic induction time).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy.optimize import brentq, linprog

from exomap.core.errors import ModelInputError
from exomap.core.scenario import R_GAS, Scenario

#: 24 hours [s], the time that defines TD24.
DAY = 86400.0


def _mask(sc: Scenario, which: str) -> np.ndarray:
    decomp = np.array([r.decomposition for r in sc.reactions], dtype=bool)
    if which == "main":
        return ~decomp
    if which == "decomposition":
        return decomp
    if which == "all":
        return np.ones(len(sc.reactions), dtype=bool)
    raise ValueError(f"which must be main, decomposition or all, got {which!r}")


def max_heat(sc: Scenario, c: ArrayLike, which: str = "main") -> float:
    """Most heat per volume the mixture ``c`` can release through the chosen reactions [J/m^3].

    .. math:: \\max_{\\xi \\ge 0} \\sum_j (-\\Delta H_j)\\,\\xi_j \\quad \\text{s.t.} \\quad
              c_i + \\sum_j \\nu_{ij}\\,\\xi_j \\ge 0

    a linear programme over the extents ξ_j [mol/m^3]: each reaction runs as far as its reactants (including
    those made by other reactions) allow, in whichever combination releases the most heat. Endothermic
    reactions are left out by the maximisation itself.

    Parameters
    ----------
    sc : Scenario
    c : sequence of float
        Concentrations [mol/m^3], one per species.
    which : str
        ``main`` (reactions not marked decomposition), ``decomposition`` or ``all``.

    Returns
    -------
    float
        [J/m^3]; 0 when no chosen reaction can run.

    Notes
    -----
    For one reaction this is ``(-ΔH)·min_i c_i/|ν_i|`` over its reactants; for parallel reactions sharing a
    reactant it takes the most exothermic path, so it is an upper bound on what the real selectivity gives.
    """
    mask = _mask(sc, which)
    if not mask.any():
        return 0.0
    nu = sc.nu[:, mask]
    gain = -sc.dH[mask]
    cv = np.maximum(np.asarray(c, dtype=float), 0.0)
    if len(gain) == 1:
        reactants = nu[:, 0] < 0
        xi = float(np.min(cv[reactants] / -nu[reactants, 0]))
        return max(float(gain[0]) * xi, 0.0)
    res = linprog(-gain, A_ub=-nu, b_ub=cv, bounds=[(0, None)] * len(gain), method="highs")
    if res.status != 0:
        raise ModelInputError(
            f"the heat potential of the reactions is unbounded or infeasible: {res.message}", field="reactions"
        )
    return max(float(-res.fun), 0.0)


def adiabatic_temperature_rise(sc: Scenario, c: ArrayLike | None = None, which: str = "main") -> float:
    """Adiabatic temperature rise ΔT_ad [K] of the mixture ``c`` (default the feed).

    .. math:: \\Delta T_{ad} = \\frac{\\max \\sum_j (-\\Delta H_j)\\,\\xi_j}{\\rho\\,c_p}

    Parameters
    ----------
    sc : Scenario
    c : sequence of float, optional
        Concentrations [mol/m^3]; default the feed ``sc.c_in``.
    which : str
        ``main`` (the default: the synthesis reactions, decomposition reactions counted separately),
        ``decomposition`` or ``all``. See ``max_heat`` for what is counted.

    Returns
    -------
    float
        [K]

    Examples
    --------
    >>> # 2000 mol/m^3 of A -> B with dH = -100 kJ/mol in water-like liquid: 2000*1e5/(1000*4000) = 50 K
    >>> # adiabatic_temperature_rise(sc)  # doctest: +SKIP

    References
    ----------
    [1] F. Stoessel (2008), ch. 2.
    """
    c = sc.c_in if c is None else c
    return max_heat(sc, c, which) / (sc.rho * sc.cp)


def mtsr(T_ss: float, dT_ad: float, X_ss: float) -> float:
    """Maximum temperature of the synthesis reaction [K].

    .. math:: MTSR = T_{ss} + \\Delta T_{ad}\\,(1 - X_{ss})

    Parameters
    ----------
    T_ss : float
        Operating (steady) temperature [K].
    dT_ad : float
        Adiabatic temperature rise of the feed [K].
    X_ss : float
        Conversion of the key reactant at the operating state [-].

    Returns
    -------
    float
        [K]

    Examples
    --------
    >>> mtsr(350.0, 100.0, 0.8)
    370.0

    References
    ----------
    [1] F. Stoessel (2008), ch. 3; DESIGN.md §2 of this project.
    """
    return T_ss + dT_ad * (1.0 - X_ss)


def heat_release(sc: Scenario, T: float, c: ArrayLike, which: str = "all") -> tuple[float, float]:
    """Specific heat-release rate q' [W/kg] and its temperature derivative dq'/dT [W/(kg K)] at T, c."""
    mask = _mask(sc, which)
    C = np.maximum(np.asarray(c, dtype=float), 0.0)
    with np.errstate(over="ignore", under="ignore"):
        k = sc.k0 * np.exp(-sc.Ea / (R_GAS * T))
        r = k * np.prod(C[None, :] ** sc.orders, axis=1)
    qj = np.where(mask, -sc.dH * r / sc.rho, 0.0)
    return float(qj.sum()), float(np.sum(qj * sc.Ea) / (R_GAS * T * T))


def tmr_ad(sc: Scenario, T0: float, c: ArrayLike, which: str = "all") -> float:
    """Time to maximum rate under adiabatic conditions from T0, zero-order approximation [s].

    .. math:: TMR_{ad} = \\frac{c_p\\,R\\,T_0^2}{q'(T_0)\\,E_a}

    with q'(T_0) the specific heat-release rate at T0 [W/kg]. For several reactions the denominator is
    Σ_j q'_j E_a,j (the same expression, R T0² dq'/dT = Σ q'_j E_a,j).

    Parameters
    ----------
    sc : Scenario
    T0 : float
        Starting temperature [K].
    c : sequence of float
        Concentrations [mol/m^3] at the start.
    which : str
        Reactions counted: ``all`` (default), ``main`` or ``decomposition``.

    Returns
    -------
    float
        [s]; ``inf`` when nothing releases heat at T0.

    Notes
    -----
    Zero-order approximation [1]: reactant consumption is neglected and exp(-Ea/RT) is replaced by its
    expansion exp(-Ea/RT0)·exp(Ea(T-T0)/(R T0^2)) about T0 [3]. Both make the estimate short (conservative):
    the exact Arrhenius factor grows more slowly above T0 than the expansion, which lengthens the real time by
    a relative amount of order 2·R·T0/Ea, and consumption lowers the rate, which lengthens it by a relative
    amount of order R·T0^2/(Ea·ΔT_ad). It is accurate when Ea/(R·T0) is large (say above 30) and the adiabatic
    rise is large against R·T0^2/Ea; it is a screening figure.

    Examples
    --------
    >>> # cp = 2000 J/(kg K), T0 = 400 K, Ea = 100 kJ/mol, q' = 1 W/kg:
    >>> round(2000 * 8.314462618 * 400**2 / (1.0 * 100e3) / 3600, 2)  # hours
    7.39

    References
    ----------
    [1] D. I. Townsend, J. C. Tou (1980), Thermochimica Acta 37, 1-30.
    [3] D. A. Frank-Kamenetskii (1969).
    """
    _, dq_dT = heat_release(sc, T0, c, which)
    if not dq_dT > 0.0:
        return math.inf
    return sc.cp / dq_dT


def td24(sc: Scenario, c: ArrayLike, *, T_lo: float = 250.0, T_hi: float = 1500.0) -> float | None:
    """TD24: the temperature at which the TMRad of the decomposition reactions is 24 h [K].

    .. math:: \\frac{c_p\\,R\\,T_{D24}^2}{q'_D(T_{D24})\\,E_{a,D}} = 24\\ \\text{h}

    solved with Brent's method on log TMRad (which falls monotonically with T where Ea > 2RT).

    Parameters
    ----------
    sc : Scenario
    c : sequence of float
        Concentrations of the reaction mass whose decomposition is assessed [mol/m^3].
    T_lo, T_hi : float
        Search bracket [K].

    Returns
    -------
    float or None
        [K]; None when the scenario has no decomposition reaction or it cannot run with ``c``, or the 24 h
        crossing lies outside the bracket.

    References
    ----------
    [1] F. Stoessel (2008), ch. 3; D. I. Townsend, J. C. Tou (1980).
    """
    if not _mask(sc, "decomposition").any():
        return None

    def g(T: float) -> float:
        t = tmr_ad(sc, T, c, "decomposition")
        return math.log(t) - math.log(DAY) if math.isfinite(t) else math.inf

    g_lo, g_hi = g(T_lo), g(T_hi)
    if not (math.isfinite(g_hi) and g_hi < 0.0 < g_lo):
        return None
    return float(brentq(g, T_lo, T_hi, xtol=1e-9, rtol=1e-12))


def criticality_class(T_p: float, MTSR: float, MTT: float | None, TD24: float | None) -> tuple[int | None, str]:
    """Criticality class 1–5 in the manner of Stoessel [1], from the order of T_p, MTSR, MTT and TD24.

    ====== =========================== ==============================================================
    class  order                       meaning
    ====== =========================== ==============================================================
    1      MTSR < MTT, MTSR < TD24,     a runaway does not reach the boiling point nor start the
           MTT < TD24                   decomposition
    2      MTSR < MTT, MTSR < TD24,     as 1, but the decomposition could start if the mass stayed
           TD24 <= MTT                  long at MTT
    3      MTT <= MTSR < TD24           the boiling point (MTT) is reached; evaporative cooling can
                                        act as a barrier
    4      MTT < TD24 <= MTSR           MTT is reached before the decomposition; the barrier at MTT
                                        is essential
    5      TD24 <= MTSR, TD24 <= MTT    the runaway starts the decomposition before MTT can act
    ====== =========================== ==============================================================

    Parameters
    ----------
    T_p : float
        Process (operating) temperature [K].
    MTSR : float
        [K]
    MTT : float or None
        Maximum technical temperature (e.g. the boiling point at the working pressure) [K].
    TD24 : float or None
        [K]

    Returns
    -------
    (int or None, str)
        The class and a one-line reason (why it is None when it is).

    Examples
    --------
    >>> criticality_class(330.0, 350.0, 373.0, 420.0)[0]
    1
    >>> criticality_class(330.0, 450.0, 373.0, 420.0)[0]
    4

    References
    ----------
    [1] F. Stoessel (2008), ch. 3 (criticality classes of scenarios).
    """
    if MTT is None and TD24 is None:
        return None, "needs the maximum technical temperature (MTT) and a decomposition reaction (TD24)"
    if MTT is None:
        return None, "needs the maximum technical temperature (limits.technical_limit_temperature)"
    if TD24 is None:
        return None, "needs TD24, which needs a decomposition reaction in the scenario"
    if MTSR < MTT and MTSR < TD24:
        if MTT < TD24:
            return 1, f"MTSR {MTSR:.1f} K < MTT {MTT:.1f} K < TD24 {TD24:.1f} K"
        return 2, f"MTSR {MTSR:.1f} K < TD24 {TD24:.1f} K <= MTT {MTT:.1f} K"
    if MTSR < TD24:
        return 3, f"MTT {MTT:.1f} K <= MTSR {MTSR:.1f} K < TD24 {TD24:.1f} K"
    if MTT < TD24:
        return 4, f"MTT {MTT:.1f} K < TD24 {TD24:.1f} K <= MTSR {MTSR:.1f} K"
    return 5, f"TD24 {TD24:.1f} K <= MTSR {MTSR:.1f} K and TD24 <= MTT {MTT:.1f} K"


@dataclass(frozen=True)
class SafetyFigures:
    """Thermal-safety figures of one operating state (see the module docstring).

    Attributes
    ----------
    tau, T_in : float
        Operating point [s], [K].
    T_process : float
        Operating (steady) temperature [K].
    conversion : float
        Of the key reactant at the operating state [-].
    dT_ad : float
        Adiabatic rise of the feed by the synthesis reactions [K].
    dT_ad_decomposition : float
        Further adiabatic rise the decomposition reactions could add from the feed [K] (0 without one).
    mtsr : float
        [K]
    tmr_ad : float
        TMRad from the operating state, all reactions, zero-order approximation [s] (inf: no heat release).
    tmr_ad_decomposition_at_mtsr : float or None
        TMRad of the decomposition at MTSR [s].
    td24, mtt : float or None
        [K]
    criticality_class : int or None
    criticality_reason : str
    notes : tuple of str
    has_decomposition : bool
        Whether the scenario marks a decomposition reaction (without one, TD24 and the decomposition rise are
        not given, and the answer says so in words).
    """

    tau: float
    T_in: float
    T_process: float
    conversion: float
    dT_ad: float
    dT_ad_decomposition: float
    mtsr: float
    tmr_ad: float
    tmr_ad_decomposition_at_mtsr: float | None
    td24: float | None
    mtt: float | None
    criticality_class: int | None
    criticality_reason: str
    notes: tuple[str, ...] = field(default_factory=tuple)
    has_decomposition: bool = False
    success: bool = True
    message: str = "ok"

    def to_dict(self) -> dict[str, Any]:
        def fin(x: float | None) -> float | None:
            return None if x is None or not math.isfinite(x) else float(x)

        given = self.has_decomposition
        return {
            "process_temperature_K": self.T_process,
            "conversion": self.conversion,
            "adiabatic_temperature_rise_K": self.dT_ad,
            # without a decomposition reaction there is nothing to report: say so rather than print 0 K and none
            "decomposition": None if given else "no decomposition reaction given",
            "decomposition_temperature_rise_K": self.dT_ad_decomposition if given else None,
            "mtsr_K": self.mtsr,
            "tmr_ad_s": fin(self.tmr_ad),
            "tmr_ad_decomposition_at_mtsr_s": fin(self.tmr_ad_decomposition_at_mtsr),
            "td24_K": fin(self.td24),
            "mtt_K": fin(self.mtt),
            "criticality_class": self.criticality_class,
            "criticality_reason": self.criticality_reason,
            "notes": list(self.notes),
        }


def _state_parts(sc: Scenario, state: Any) -> tuple[float, np.ndarray, float]:
    T = float(state.T)
    C = np.asarray(state.C, dtype=float)
    X = getattr(state, "conversion", None)
    if X is None:
        i = sc.key_species
        X = 1.0 - C[i] / sc.c_in[i] if sc.c_in[i] > 0 else float("nan")
    return T, C, float(X)


def safety_figures(sc: Scenario, tau: float, T_in: float, state: Any) -> SafetyFigures:
    """Thermal-safety figures of an operating state.

    Parameters
    ----------
    sc : Scenario
    tau : float
        Residence time [s] (recorded with the result).
    T_in : float
        Feed temperature [K] (recorded with the result).
    state : object with ``T`` [K], ``C`` [mol/m^3] and optionally ``conversion`` [-]
        The operating state, e.g. a ``SteadyState``.

    Returns
    -------
    SafetyFigures

    Notes
    -----
    ΔT_ad is that of the scenario's feed. MTSR follows DESIGN.md §2, T_ss + ΔT_ad·(1 − X_ss); when the feed
    holds none of the key reactant (X undefined) it is T_ss plus the heat potential left in the tank. TMRad is
    evaluated at the operating state with all reactions; TD24 and the TMRad of the decomposition use the
    concentrations of the operating state.

    References
    ----------
    [1] D. I. Townsend, J. C. Tou (1980); [2] F. Stoessel (2008). See the module docstring.
    """
    T, C, X = _state_parts(sc, state)
    notes: list[str] = []
    dT_ad = adiabatic_temperature_rise(sc, sc.c_in, "main")
    dT_all = adiabatic_temperature_rise(sc, sc.c_in, "all")
    dT_dec = max(dT_all - dT_ad, 0.0)
    if math.isfinite(X):
        MTSR = mtsr(T, dT_ad, X)
    else:
        MTSR = T + adiabatic_temperature_rise(sc, C, "main")
        notes.append("the feed holds none of the key reactant; MTSR uses the heat potential left in the tank")
    tmr = tmr_ad(sc, T, C, "all")
    if not math.isfinite(tmr):
        notes.append("nothing releases heat at the operating state; TMRad is unbounded")
    notes.append(
        "TMRad by the zero-order approximation (Townsend & Tou 1980): conservative while little reactant is used "
        "on the way; it assumes no heat removal at all"
    )
    has_dec = bool(_mask(sc, "decomposition").any())
    TD24 = td24(sc, C) if has_dec else None
    tmr_dec = tmr_ad(sc, MTSR, C, "decomposition") if has_dec else None
    if not has_dec:
        notes.append("no decomposition reaction in the scenario: TD24 and the criticality class are not given")
    elif TD24 is None:
        notes.append("TD24 could not be found between 250 K and 1500 K for the reaction mass at the operating state")
    MTT = sc.limits.T_mtt
    cls, why = criticality_class(T, MTSR, MTT, TD24)
    return SafetyFigures(
        tau=tau,
        T_in=T_in,
        T_process=T,
        conversion=X,
        dT_ad=dT_ad,
        dT_ad_decomposition=dT_dec,
        mtsr=MTSR,
        tmr_ad=tmr,
        tmr_ad_decomposition_at_mtsr=tmr_dec,
        has_decomposition=has_dec,
        td24=TD24,
        mtt=MTT,
        criticality_class=cls,
        criticality_reason=why,
        notes=tuple(notes),
    )
