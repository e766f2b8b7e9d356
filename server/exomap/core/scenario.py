"""Plain SI description of a reactor scenario, as the numerical core sees it.

The schema layer (``exomap.schema``) parses the JSON scenario format of DESIGN.md §3, converts every
quantity to SI base units and builds these dataclasses. The core never sees unit strings.

Conventions
-----------
* Species are indexed in the order of ``Scenario.species``; per-species tuples follow that order.
* Stoichiometric coefficients ``nu`` are negative for reactants, positive for products; rates are extent
  rates per volume [mol/(m^3 s)].
* ``dH`` is the reaction enthalpy per mole of reaction as written [J/mol]; exothermic is negative.
* The outlet valve stores ``Kv`` [m^3/h at 1 bar]; the schema converts a ``cv`` to ``Kv``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from exomap.core.errors import ModelInputError

#: Standard gravity [m/s^2] (CGPM 1901, exact by definition).
G = 9.80665
#: Molar gas constant [J/(mol K)] (CODATA 2018, exact since the 2019 SI).
R_GAS = 8.314462618

LINEAR = "linear"
EQUAL_PERCENTAGE = "equal_percentage"
QUICK_OPENING = "quick_opening"
CHARACTERISTICS = (LINEAR, EQUAL_PERCENTAGE, QUICK_OPENING)


@dataclass(frozen=True)
class Reaction:
    """One power-law reaction ``sum_i nu_i A_i -> 0``.

    Attributes
    ----------
    label : str
    nu : tuple of float
        Stoichiometric coefficient of each species [-].
    orders : tuple of float
        Reaction order in each species [-].
    k0 : float
        Pre-exponential factor [(mol/m^3)^(1 - sum(orders)) / s].
    Ea : float
        Activation energy [J/mol].
    dH : float
        Reaction enthalpy per mole of reaction [J/mol]; exothermic is negative.
    decomposition : bool
        True for a decomposition reaction (used for TD24 and the criticality class).
    """

    label: str
    nu: tuple[float, ...]
    orders: tuple[float, ...]
    k0: float
    Ea: float
    dH: float
    decomposition: bool = False


@dataclass(frozen=True)
class Vessel:
    """Vertical flat-bottomed cylinder.

    Attributes: ``D`` diameter [m], ``H`` height [m], ``h_set`` level setpoint [m], ``p_head`` headspace
    pressure [Pa, absolute].
    """

    D: float
    H: float
    h_set: float
    p_head: float = 101325.0

    @property
    def area(self) -> float:
        """Cross-section [m^2]."""
        return math.pi * self.D**2 / 4.0

    @property
    def V_set(self) -> float:
        """Liquid volume at the level setpoint [m^3]."""
        return self.area * self.h_set


@dataclass(frozen=True)
class Valve:
    """Outlet control valve (IEC 60534-2-1 liquid, non-choked).

    Attributes
    ----------
    Kv : float
        Flow coefficient at full opening [m^3/h of water at 1 bar].
    characteristic : str
        ``linear`` | ``equal_percentage`` | ``quick_opening``.
    rangeability : float
        R of the equal-percentage characteristic [-].
    p_down : float
        Downstream pressure [Pa, absolute].
    z_drop : float
        Height of the vessel bottom above the valve [m].
    opening : float or None
        Fixed opening [-] (0..1); None with a level controller.
    gain : float or None
        PI level-controller gain [1/m]: opening per metre of level above setpoint.
    reset_time : float or None
        PI reset (integral) time [s].
    """

    Kv: float
    characteristic: str = LINEAR
    rangeability: float = 50.0
    p_down: float = 101325.0
    z_drop: float = 0.0
    opening: float | None = None
    gain: float | None = None
    reset_time: float | None = None

    @property
    def controlled(self) -> bool:
        return self.gain is not None


@dataclass(frozen=True)
class Limits:
    """Operating limits. ``T_max`` highest allowed temperature [K]; ``T_alarm`` alarm temperature [K];
    ``h_high``, ``h_low`` level alarms [m]; ``T_mtt`` maximum technical temperature (MTT) [K] or None."""

    T_max: float
    T_alarm: float | None = None
    h_high: float | None = None
    h_low: float | None = None
    T_mtt: float | None = None


@dataclass(frozen=True)
class CheckPolicy:
    """Thresholds of the setpoint check (DESIGN.md §6). All are project defaults, overridable.

    Attributes
    ----------
    min_feed_temperature_margin : float
        Feed-temperature rise to ignition below which the point is marginal [K]. Default 10 K.
    min_residence_time_margin : float
        Residence-time rise to ignition below which the point is marginal [-, fraction]. Default 0.25.
    min_extinction_margin : float
        Feed-temperature drop to extinction for a hot state [K]. Default 10 K.
    min_temperature_margin : float
        Steady temperature below the maximum temperature [K]. Default 20 K.
    min_mtsr_margin : float
        MTSR below the maximum temperature [K]. Default 0 K (MTSR must not exceed it).
    sensitivity : float
        Steady-temperature rise per kelvin of feed temperature above which a state is "sensitive" [-].
        Default 3.
    valve_min, valve_max : float
        Usable valve opening range [-]. Default 0.2..0.8 (common practice).
    upset_duration : float
        Cap on the simulated time of each upset [s]: an upset is followed until it settles, stops (overflow,
        empty) or reaches this; one still heating at the cap is a reason. Default 24 h, the horizon of TD24:
        a hazard that takes longer than a day to develop is outside what the check looks at.
    min_time_to_act : float
        An upset that overflows the vessel sooner than this is marginal [s]. Default 30 min (common practice:
        an operator's response to an alarm is usually credited only when some 10 to 30 minutes are available
        to notice, diagnose and act; the upper end is taken).
    max_unsafe_probability : float
        Under uncertain data (DESIGN.md §11): the highest acceptable one-sided 95 % bound on the probability
        that a cell is unsafe (runaway or unstable) or that the check's verdict is ``outside`` [-]. Default
        0.05 (a project default, not a standard: 1 in 20 under the stated uncertainty; with the default 256
        samples a cell qualifies with up to 7 unsafe samples, and below 59 samples none can).
    """

    min_feed_temperature_margin: float = 10.0
    min_residence_time_margin: float = 0.25
    min_extinction_margin: float = 10.0
    min_temperature_margin: float = 20.0
    min_mtsr_margin: float = 0.0
    sensitivity: float = 3.0
    valve_min: float = 0.2
    valve_max: float = 0.8
    upset_duration: float = 24 * 3600.0
    min_time_to_act: float = 30 * 60.0
    max_unsafe_probability: float = 0.05


@dataclass(frozen=True)
class MapSpec:
    """Default map window: ``tau_range`` [s], ``T_in_range`` [K], ``points`` (n_tau, n_tin)."""

    tau_range: tuple[float, float]
    T_in_range: tuple[float, float]
    points: tuple[int, int] = (200, 200)


@dataclass(frozen=True)
class Scenario:
    """A whole scenario in SI units.

    Attributes
    ----------
    species : tuple of str
    rho : float
        Liquid density [kg/m^3].
    cp : float
        Liquid heat capacity [J/(kg K)].
    vessel, valve : Vessel, Valve
    reactions : tuple of Reaction
    q_in : float
        Feed flow [m^3/s].
    T_in : float
        Feed temperature [K].
    c_in : tuple of float
        Feed concentrations [mol/m^3].
    UA_jacket, T_c : float
        Jacket conductance [W/K] (0: no jacket) and coolant temperature [K].
    UA_loss, T_amb : float
        Heat-loss conductance [W/K] and ambient temperature [K].
    P_agitator : float
        Agitator power dissipated in the liquid [W].
    limits : Limits
    policy : CheckPolicy
    map : MapSpec or None
    title, description : str
    """

    species: tuple[str, ...]
    rho: float
    cp: float
    vessel: Vessel
    valve: Valve
    reactions: tuple[Reaction, ...]
    q_in: float
    T_in: float
    c_in: tuple[float, ...]
    limits: Limits
    UA_jacket: float = 0.0
    T_c: float = 298.15
    UA_loss: float = 0.0
    T_amb: float = 298.15
    P_agitator: float = 0.0
    policy: CheckPolicy = field(default_factory=CheckPolicy)
    map: MapSpec | None = None
    title: str = ""
    description: str = ""
    #: How well the data are known (``exomap.core.uncertainty.UncertaintySpec``) or None.
    uncertainty: Any = None

    # -- derived arrays (cheap; computed on demand, never stored) -------------------------------------
    @property
    def n_species(self) -> int:
        return len(self.species)

    @property
    def nu(self) -> np.ndarray:
        """Stoichiometric matrix, shape (n_species, n_reactions) [-]."""
        return np.array([r.nu for r in self.reactions], dtype=float).T

    @property
    def orders(self) -> np.ndarray:
        """Orders, shape (n_reactions, n_species) [-]."""
        return np.array([r.orders for r in self.reactions], dtype=float)

    @property
    def k0(self) -> np.ndarray:
        return np.array([r.k0 for r in self.reactions], dtype=float)

    @property
    def Ea(self) -> np.ndarray:
        return np.array([r.Ea for r in self.reactions], dtype=float)

    @property
    def dH(self) -> np.ndarray:
        return np.array([r.dH for r in self.reactions], dtype=float)

    @property
    def tau_nominal(self) -> float:
        """Residence time of the scenario's own feed flow at the level setpoint [s]."""
        return self.vessel.V_set / self.q_in

    @property
    def key_species(self) -> int:
        """Index of the first reactant of the first reaction (conversion is reported for it)."""
        nu = self.reactions[0].nu
        for i, v in enumerate(nu):
            if v < 0:
                return i
        raise ModelInputError("the first reaction has no reactant", field="reactions[0].stoichiometry")

    def with_changes(self, **changes: object) -> Scenario:
        """A copy with some attributes replaced (dataclasses.replace)."""
        return replace(self, **changes)  # type: ignore[arg-type]


def validate(sc: Scenario) -> None:
    """Check the physical domain of a scenario; raise ``ModelInputError`` naming the field.

    The schema layer checks units and names; this checks what any caller of the core could get wrong.
    """

    def positive(value: float, name: str) -> None:
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            raise ModelInputError(f"{name} must be a finite positive number, got {value!r}", field=name)

    def finite(value: float, name: str) -> None:
        if not (isinstance(value, (int, float)) and math.isfinite(value)):
            raise ModelInputError(f"{name} must be a finite number, got {value!r}", field=name)

    if not sc.species:
        raise ModelInputError("at least one species is needed", field="species")
    if not sc.reactions:
        raise ModelInputError("at least one reaction is needed", field="reactions")
    positive(sc.rho, "liquid.density")
    positive(sc.cp, "liquid.heat_capacity")
    positive(sc.vessel.D, "vessel.diameter")
    positive(sc.vessel.H, "vessel.height")
    positive(sc.vessel.h_set, "vessel.level_setpoint")
    if sc.vessel.h_set > sc.vessel.H:
        raise ModelInputError("level setpoint is above the vessel height", field="vessel.level_setpoint")
    positive(sc.vessel.p_head, "vessel.headspace_pressure")
    positive(sc.valve.Kv, "outlet_valve.kv")
    if sc.valve.characteristic not in CHARACTERISTICS:
        raise ModelInputError(
            f"characteristic must be one of {', '.join(CHARACTERISTICS)}", field="outlet_valve.characteristic"
        )
    if sc.valve.rangeability <= 1 or not math.isfinite(sc.valve.rangeability):
        raise ModelInputError("rangeability must be a number above 1", field="outlet_valve.rangeability")
    finite(sc.valve.p_down, "outlet_valve.downstream_pressure")
    finite(sc.valve.z_drop, "outlet_valve.drop_below_vessel")
    if sc.valve.opening is not None and not (0.0 <= sc.valve.opening <= 1.0):
        raise ModelInputError("opening must lie in 0..1", field="outlet_valve.opening")
    if sc.valve.gain is not None:
        finite(sc.valve.gain, "outlet_valve.level_control.gain")
        positive(sc.valve.reset_time or float("nan"), "outlet_valve.level_control.reset_time")
    positive(sc.q_in, "feed.flow")
    positive(sc.T_in, "feed.temperature")
    if len(sc.c_in) != sc.n_species:
        raise ModelInputError("one feed concentration per species is needed", field="feed.concentrations")
    for name, c in zip(sc.species, sc.c_in, strict=True):
        if not (math.isfinite(c) and c >= 0):
            raise ModelInputError(f"feed concentration of {name} must be >= 0", field=f"feed.concentrations.{name}")
    for j, r in enumerate(sc.reactions):
        where = f"reactions[{j}]"
        if len(r.nu) != sc.n_species or len(r.orders) != sc.n_species:
            raise ModelInputError("stoichiometry and orders need one entry per species", field=where)
        if not any(v < 0 for v in r.nu):
            raise ModelInputError(
                "a reaction needs at least one reactant (negative coefficient)", field=f"{where}.stoichiometry"
            )
        for i, (v, n) in enumerate(zip(r.nu, r.orders, strict=True)):
            finite(v, f"{where}.stoichiometry.{sc.species[i]}")
            finite(n, f"{where}.orders.{sc.species[i]}")
            if n < 0:
                raise ModelInputError("orders must be >= 0", field=f"{where}.orders.{sc.species[i]}")
            if n > 0 and v > 0:
                raise ModelInputError(
                    "a positive order in a product (autocatalysis) is not supported yet",
                    field=f"{where}.orders.{sc.species[i]}",
                )
        if not any(v < 0 and n > 0 for v, n in zip(r.nu, r.orders, strict=True)):
            # a rate that does not fall as its reactants run out would drive concentrations negative
            raise ModelInputError(
                "a reaction needs a positive order in at least one of its reactants", field=f"{where}.orders"
            )
        positive(r.k0, f"{where}.pre_exponential")
        positive(r.Ea, f"{where}.activation_energy")
        finite(r.dH, f"{where}.reaction_enthalpy")
    for name in ("UA_jacket", "UA_loss", "P_agitator"):
        value = getattr(sc, name)
        finite(value, name)
        if value < 0:
            raise ModelInputError(
                f"{name} must be >= 0",
                field={"UA_jacket": "jacket.ua", "UA_loss": "heat_loss.ua", "P_agitator": "agitator_power"}[name],
            )
    positive(sc.T_c, "jacket.coolant_temperature")
    positive(sc.T_amb, "heat_loss.ambient_temperature")
    positive(sc.limits.T_max, "limits.max_temperature")
    check_zero_orders(sc.species, sc.nu, sc.orders, np.asarray(sc.c_in, dtype=float))


def check_zero_orders(species: tuple[str, ...], nu: np.ndarray, orders: np.ndarray, c_in: np.ndarray) -> None:
    """Refuse order 0 in a reactant that this feed can use up (``ModelInputError`` naming
    ``reactions[j].orders.X``).

    A rate with order 0 in a reactant does not fall as that reactant runs out, so the species balance would
    drive its concentration below zero. exomap does not switch such a rate off at exhaustion (that would make
    the rate, and the Jacobian that decides stability, jump where the reactant is used up); it accepts order 0
    only in a reactant the feed holds in excess: over every composition the reactions can reach from this
    feed (C = C_in + nu xi with xi >= 0 and every species with a positive order non-negative, since those
    rates stop as their species run out), the reactant stays at or above zero. That is a small linear
    programme per such reactant (scipy's HiGHS). Pseudo-first-order kinetics with a reactant in large excess
    pass; a zero-order reactant that can be the limiting one is refused.
    """
    m = nu.shape[1]
    used = [(j, i) for j in range(m) for i in range(len(species)) if nu[i, j] < 0 and orders[j, i] == 0]
    if not used:
        return
    from scipy.optimize import linprog

    scale = max(float(np.max(c_in)), 1.0)
    for j, i in used:
        # the species whose rates stop as they run out, other than this one (its order 0 here lets it go on)
        limited = [k for k in range(len(species)) if k != i and np.any(orders[:, k] > 0)]
        # minimise C_i = c_in_i + nu_i . xi over xi >= 0 with C_l >= 0 for the self-limiting species l
        res = linprog(
            nu[i],
            A_ub=-nu[limited] if limited else None,
            b_ub=c_in[limited] if limited else None,
            bounds=[(0, None)] * m,
            method="highs",
        )
        lowest = c_in[i] + res.fun if res.status == 0 else -math.inf
        if lowest < -1e-9 * scale:
            name = species[i]
            raise ModelInputError(
                f"order 0 in {name}, a reactant this feed can use up: a zero-order rate does not fall as {name} "
                f"runs out, so its concentration would go negative; give {name} a positive order (e.g. 1) or feed "
                f"it in excess of what the reactions can consume",
                field=f"reactions[{j}].orders.{name}",
            )
