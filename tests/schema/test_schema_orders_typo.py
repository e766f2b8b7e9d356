"""Issue 9, defect 9: a typo'd species in ``orders`` is named as such, never blamed on ``pre_exponential``, and
independent field errors are reported together."""

from __future__ import annotations

import pytest
from exomap.schema import parse_scenario
from exomap.schema.errors import ScenarioError


def _fields(doc: dict) -> list[str]:
    with pytest.raises(ScenarioError) as info:
        parse_scenario(doc)
    return [e["field"] for e in info.value.errors]


def test_undeclared_species_in_orders_is_named_not_the_k0_dimension(doc):
    # the user meant {"A": 2} and wrote {"Q": 2}; k0 carries the unit of a second-order rate constant
    doc["reactions"][0]["orders"] = {"Q": 2}
    doc["reactions"][0]["pre_exponential"] = "1e3 L/(mol s)"
    assert _fields(doc) == ["reactions[0].orders.Q"]


def test_undeclared_species_with_a_k0_of_the_declared_order_only(doc):
    # k0 in 1/s fits the order without Q: still only the typo is reported
    doc["reactions"][0]["orders"] = {"A": 1, "Q": 2}
    assert _fields(doc) == ["reactions[0].orders.Q"]


def test_typo_and_an_independent_field_error_are_reported_at_once(doc):
    doc["reactions"][0]["orders"] = {"Q": 2}
    doc["reactions"][0]["pre_exponential"] = "1e3 L/(mol s)"
    doc["vessel"]["diameter"] = "1.2 kg"
    fields = _fields(doc)
    # the typo first, then the field pydantic refused
    assert fields == ["reactions[0].orders.Q", "vessel.diameter"]


def test_a_negative_order_does_not_make_k0_look_wrong(doc):
    doc["reactions"][0]["orders"] = {"A": -1}
    doc["reactions"][0]["pre_exponential"] = "1e3 L/(mol s)"
    fields = _fields(doc)
    assert fields == ["reactions[0].orders.A"]


def test_k0_that_is_no_rate_constant_is_still_refused_beside_the_typo(doc):
    doc["reactions"][0]["orders"] = {"Q": 2}
    doc["reactions"][0]["pre_exponential"] = "1e3 kg"
    fields = _fields(doc)
    assert fields[0] == "reactions[0].orders.Q"
    assert "reactions[0].pre_exponential" in fields


def test_declared_orders_still_check_the_k0_dimension(doc):
    # A is declared: total order 1 wants 1/s, a second-order unit is a wrong dimension
    doc["reactions"][0]["pre_exponential"] = "1e3 L/(mol s)"
    with pytest.raises(ScenarioError, match=r"reactions\[0\]\.pre_exponential: .*wrong dimension"):
        parse_scenario(doc)
