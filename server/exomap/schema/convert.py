"""From a validated ``ScenarioDoc`` to the core's ``Scenario``: cross-field checks, then conversion.

Cross-field checks (species declared, limits ordered, windows increasing) run after pydantic has checked
each field, so each message can name the exact field (``reactions[1].orders.B``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from exomap.core.errors import ModelInputError
from exomap.core.scenario import CheckPolicy, Limits, MapSpec, Reaction, Scenario, Valve, Vessel, validate
from exomap.core.uncertainty import validate_spec
from exomap.schema.errors import ScenarioError
from exomap.schema.uncertainty import errors as uncertainty_errors
from exomap.schema.uncertainty import to_spec as uncertainty_spec

if TYPE_CHECKING:
    from exomap.schema.document import ScenarioDoc


def cross_check(doc: ScenarioDoc) -> list[dict[str, str]]:
    """Checks that involve more than one field; one message per field."""
    errors: list[dict[str, str]] = []

    def add(field: str, message: str) -> None:
        if all(e["field"] != field for e in errors):
            errors.append({"field": field, "message": message})

    declared = list(doc.species)
    seen: set[str] = set()
    for i, name in enumerate(declared):
        if name in seen:
            add(f"species[{i}]", f"species {name!r} is declared twice")
        seen.add(name)
    listing = ", ".join(declared)

    def known(mapping: dict[str, float], where: str) -> None:
        for name in mapping:
            if name not in seen:
                add(f"{where}.{name}", f"unknown species {name!r}; declared species: {listing}")

    for j, r in enumerate(doc.reactions):
        known(r.stoichiometry, f"reactions[{j}].stoichiometry")
        known(r.orders, f"reactions[{j}].orders")
        if all(v == 0 for v in r.stoichiometry.values()):
            add(f"reactions[{j}].stoichiometry", "all coefficients are zero; reactants are negative, e.g. -1")
    known(doc.feed.concentrations, "feed.concentrations")

    lim = doc.limits
    if lim.alarm_temperature is not None and lim.alarm_temperature > lim.max_temperature:
        add(
            "limits.alarm_temperature",
            f"alarm temperature {lim.alarm_temperature:.2f} K is above the maximum "
            f"temperature {lim.max_temperature:.2f} K; expected a temperature at or below it",
        )
    if lim.level_high is not None and lim.level_high > doc.vessel.height:
        add(
            "limits.level_high",
            f"level_high {lim.level_high:g} m is above the vessel height "
            f"{doc.vessel.height:g} m; expected a length at or below it",
        )
    if lim.level_low is not None and lim.level_high is not None and lim.level_low >= lim.level_high:
        add("limits.level_low", f"level_low {lim.level_low:g} m is not below level_high {lim.level_high:g} m")
    pol = doc.check_policy
    if pol.valve_min >= pol.valve_max:
        add("check_policy.valve_min", f"valve_min {pol.valve_min:g} is not below valve_max {pol.valve_max:g}")
    if doc.map is not None:
        lo, hi = doc.map.residence_time
        if not lo < hi:
            add("map.residence_time", f"expected [lo, hi] with lo < hi, got [{lo:g} s, {hi:g} s]")
        lo, hi = doc.map.feed_temperature
        if not lo < hi:
            add("map.feed_temperature", f"expected [lo, hi] with lo < hi, got [{lo:.2f} K, {hi:.2f} K]")
    for e in uncertainty_errors(doc):
        add(e["field"], e["message"])
    return errors


def raw_species_errors(doc: dict) -> list[dict[str, str]]:
    """Species named in reactions or the feed but not declared, read off the raw document: reported beside
    the field errors of the same document (they are independent of them), so a typo is named at once."""
    declared = doc.get("species")
    if not (isinstance(declared, list) and declared and all(isinstance(s, str) for s in declared)):
        return []
    listing = ", ".join(declared)
    errors: list[dict[str, str]] = []

    def known(mapping: object, where: str) -> None:
        if isinstance(mapping, dict):
            for name in mapping:
                if name not in declared:
                    errors.append(
                        {
                            "field": f"{where}.{name}",
                            "message": f"unknown species {name!r}; declared species: {listing}",
                        }
                    )

    reactions = doc.get("reactions")
    for j, r in enumerate(reactions if isinstance(reactions, list) else []):
        if isinstance(r, dict):
            known(r.get("stoichiometry"), f"reactions[{j}].stoichiometry")
            known(r.get("orders"), f"reactions[{j}].orders")
    feed = doc.get("feed")
    if isinstance(feed, dict):
        known(feed.get("concentrations"), "feed.concentrations")
    return errors


def to_core(doc: ScenarioDoc) -> Scenario:
    """Build the core ``Scenario`` (SI) and run ``exomap.core.scenario.validate`` on it.

    Raises ``ScenarioError`` for a cross-field problem or for a ``ModelInputError`` of the core (same field).
    """
    errors = cross_check(doc)
    if errors:
        raise ScenarioError(errors)
    species = tuple(doc.species)
    reactions = tuple(
        Reaction(
            label=r.label or f"reaction {j + 1}",
            nu=tuple(float(r.stoichiometry.get(s, 0.0)) for s in species),
            orders=tuple(float(r.orders.get(s, 0.0)) for s in species),
            k0=r.pre_exponential,
            Ea=r.activation_energy,
            dH=r.reaction_enthalpy,
            decomposition=r.decomposition,
        )
        for j, r in enumerate(doc.reactions)
    )
    v = doc.outlet_valve
    assert v.kv is not None  # the document's validator turns a cv into a kv
    valve = Valve(
        Kv=v.kv,
        characteristic=v.characteristic,
        rangeability=v.rangeability,
        p_down=v.downstream_pressure,
        z_drop=v.drop_below_vessel,
        opening=v.opening,
        gain=v.level_control.gain if v.level_control else None,
        reset_time=v.level_control.reset_time if v.level_control else None,
    )
    lim = doc.limits
    defaults = Scenario.__dataclass_fields__
    sc = Scenario(
        species=species,
        rho=doc.liquid.density,
        cp=doc.liquid.heat_capacity,
        vessel=Vessel(
            D=doc.vessel.diameter,
            H=doc.vessel.height,
            h_set=doc.vessel.level_setpoint,
            p_head=doc.vessel.headspace_pressure,
        ),
        valve=valve,
        reactions=reactions,
        q_in=doc.feed.flow,
        T_in=doc.feed.temperature,
        c_in=tuple(float(doc.feed.concentrations.get(s, 0.0)) for s in species),
        limits=Limits(
            T_max=lim.max_temperature,
            T_alarm=lim.alarm_temperature,
            h_high=lim.level_high,
            h_low=lim.level_low,
            T_mtt=lim.technical_limit_temperature,
        ),
        UA_jacket=doc.jacket.ua if doc.jacket else 0.0,
        T_c=doc.jacket.coolant_temperature if doc.jacket else defaults["T_c"].default,
        UA_loss=doc.heat_loss.ua if doc.heat_loss else 0.0,
        T_amb=doc.heat_loss.ambient_temperature if doc.heat_loss else defaults["T_amb"].default,
        P_agitator=doc.agitator_power,
        policy=CheckPolicy(**{k: v for k, v in doc.check_policy.model_dump().items() if v is not None}),
        map=(
            MapSpec(
                tau_range=tuple(doc.map.residence_time),
                T_in_range=tuple(doc.map.feed_temperature),
                points=tuple(doc.map.points),
            )
            if doc.map
            else None
        ),
        title=doc.title,
        description=doc.description,
        uncertainty=uncertainty_spec(doc),
    )
    try:
        validate(sc)
        if sc.uncertainty is not None:
            validate_spec(sc, sc.uncertainty)
    except ModelInputError as exc:
        raise ScenarioError.single(exc.field or "scenario", str(exc)) from None
    return sc
