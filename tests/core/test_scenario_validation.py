"""Domain checks of core.scenario.validate that the schema layer relies on."""

import dataclasses

import pytest
from exomap.core.errors import ModelInputError
from exomap.core.scenario import Limits, Reaction, Scenario, Valve, Vessel, validate


def _scenario(orders: tuple[float, ...]) -> Scenario:
    return Scenario(
        species=("A", "P"),
        rho=900.0,
        cp=2000.0,
        vessel=Vessel(D=1.2, H=2.0, h_set=1.2),
        valve=Valve(Kv=10.0, opening=0.5),
        reactions=(Reaction("A -> P", (-1.0, 1.0), orders, 1e10, 80e3, -80e3),),
        q_in=1.0 / 3600,
        T_in=300.0,
        c_in=(1000.0, 0.0),
        limits=Limits(T_max=400.0),
    )


def test_a_rate_that_ignores_its_reactants_is_rejected():
    # zero order in the only reactant: the rate would not stop when A runs out (concentrations go negative)
    with pytest.raises(ModelInputError, match="positive order") as info:
        validate(_scenario((0.0, 0.0)))
    assert info.value.field == "reactions[0].orders"


def test_a_positive_order_in_the_reactant_is_accepted():
    validate(_scenario((1.0, 0.0)))


def test_autocatalysis_is_rejected_naming_the_species():
    with pytest.raises(ModelInputError, match="autocatalysis") as info:
        validate(_scenario((1.0, 1.0)))
    assert info.value.field == "reactions[0].orders.P"


def test_level_setpoint_above_the_vessel_is_rejected():
    sc = _scenario((1.0, 0.0))
    bad = dataclasses.replace(sc, vessel=Vessel(D=1.2, H=2.0, h_set=2.5))
    with pytest.raises(ModelInputError, match="above the vessel height") as info:
        validate(bad)
    assert info.value.field == "vessel.level_setpoint"
