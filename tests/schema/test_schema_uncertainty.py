"""The scenario's ``uncertainty`` block (DESIGN.md §11, exomap.schema.uncertainty): units per target, SI in the
canonical form, one error per field naming the target path and the unit expected, and the CLI's --samples.

Unit conversions are exact by definition (analytic): 1 kJ = 1000 J, 1 kW = 1000 W, T/K = t/degC + 273.15,
1 L = 1e-3 m^3.
"""

from __future__ import annotations

import json

import pytest
from exomap.cli import main
from exomap.schema import ScenarioError, canonical_json, parse_scenario


def _block(doc: dict, *params: dict, **extra) -> dict:
    doc["uncertainty"] = {"parameters": list(params), **extra}
    return doc


def test_units_become_si_and_the_canonical_form_round_trips(doc):
    doc["jacket"] = {"ua": "2 kW/K", "coolant_temperature": "15 degC"}
    _block(
        doc,
        {"target": "reactions[0].rate_constant", "distribution": "normal", "sd": "0.001 1/min"},
        {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "3 kJ/mol"},
        {"target": "jacket.ua", "distribution": "uniform", "low": "1.5 kW/K", "high": "2.5 kW/K"},
        {"target": "jacket.coolant_temperature", "distribution": "normal", "sd": "2 K"},
        {"target": "feed.concentrations.A", "distribution": "lognormal", "factor": 1.1},
        correlations=[["reactions[0].rate_constant", "reactions[0].activation_energy", -0.5]],
        reference_temperature="50 degC",
        samples=128,
        seed=7,
    )
    canon = json.loads(canonical_json(doc))
    u = canon["uncertainty"]
    p = {q["target"]: q for q in u["parameters"]}
    # analytic: 0.001 1/min = 0.001/60 1/s; 3 kJ/mol = 3000 J/mol; 1.5 kW/K = 1500 W/K; 50 degC = 323.15 K
    assert p["reactions[0].rate_constant"]["sd"] == pytest.approx(0.001 / 60, rel=1e-14)
    assert p["reactions[0].activation_energy"]["sd"] == 3000.0
    assert (p["jacket.ua"]["low"], p["jacket.ua"]["high"]) == (1500.0, 2500.0)
    assert p["jacket.coolant_temperature"]["sd"] == 2.0
    assert u["reference_temperature"] == pytest.approx(323.15, abs=1e-12)
    assert (u["samples"], u["seed"]) == (128, 7)
    assert canonical_json(json.loads(canonical_json(doc))) == canonical_json(doc)
    spec = parse_scenario(doc).to_core().uncertainty
    assert spec.samples == 128 and spec.correlations[0][2] == -0.5
    assert spec.parameters[0].sd == pytest.approx(0.001 / 60, rel=1e-14)


@pytest.mark.parametrize(
    ("param", "field", "words"),
    [
        ({"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "3 K"}, "sd", "J/mol"),
        ({"target": "reactions[0].rate_constant", "distribution": "normal", "sd": "2 L/(mol s)"}, "sd", "1/s"),
        ({"target": "reactions[1].activation_energy", "distribution": "normal", "sd": 1}, "target", "1 reaction"),
        (
            {"target": "reactions[0].pre_exponential", "distribution": "lognormal", "factor": 2},
            "target",
            "rate_constant",
        ),
        ({"target": "jacket.ua", "distribution": "normal", "sd": 1}, "target", "no jacket"),
        ({"target": "feed.concentrations.Z", "distribution": "normal", "sd": 1}, "target", "unknown species"),
        ({"target": "liquid.heat_capacity", "distribution": "normal"}, "sd", "J/(kg*K)"),
        ({"target": "liquid.heat_capacity", "distribution": "uniform", "low": 1000}, "high", "specific heat"),
        (
            {"target": "liquid.heat_capacity", "distribution": "lognormal", "factor": 1.2, "sd": 3},
            "sd",
            "does not apply",
        ),
        ({"target": "liquid.heat_capacity", "distribution": "lognormal", "factor": 0.5}, "factor", ""),
        ({"target": "liquid.heat_capacity", "distribution": "triangular", "sd": 3}, "distribution", "lognormal"),
    ],
)
def test_errors_name_the_field_the_target_and_the_unit(doc, param, field, words):
    _block(doc, param)
    with pytest.raises(ScenarioError) as exc:
        parse_scenario(doc)
    err = exc.value.errors[0]
    assert err["field"] == f"uncertainty.parameters[0].{field}", exc.value.errors
    assert words in err["message"]


def test_samples_power_of_two_and_correlations_name_known_targets(doc):
    _block(doc, samples=100)
    with pytest.raises(ScenarioError, match="power of two") as exc:
        parse_scenario(doc)
    assert exc.value.field == "uncertainty.samples"
    _block(
        doc,
        {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": 1000},
        correlations=[["reactions[0].activation_energy", "liquid.heat_capacity", 0.3]],
    )
    with pytest.raises(ScenarioError, match="liquid.heat_capacity") as exc:
        parse_scenario(doc)
    assert exc.value.field == "uncertainty.correlations[0]"


def test_cli_map_samples(doc, tmp_path, capsys):
    _block(doc, {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "2 kJ/mol"})
    path = tmp_path / "s.json"
    path.write_text(json.dumps(doc))
    window = ["--residence-time", "1 min", "3 h", "--feed-temperature", "0 degC", "80 degC", "--points", "8", "6"]
    assert main(["map", str(path), "--samples", "16", "--seed", "1", "--json", *window]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["samples"] == 16 and out["seed"] == 1 and len(out["probability"]["unsafe"]) == 6
    assert main(["map", str(path), "--samples", *window]) == 0
    text = capsys.readouterr().out
    assert "256 samples (seed 0)" in text and "robust window" in text
    assert main(["map", str(path), "--samples", "12", *window]) == 2
    assert "power of two" in capsys.readouterr().err


def test_max_unsafe_probability_policy(doc):
    from exomap.core.scenario import CheckPolicy

    # project default 0.05 (DESIGN.md §11 leaves it to us; documented in core.scenario.CheckPolicy)
    assert parse_scenario(doc).to_core().policy.max_unsafe_probability == CheckPolicy().max_unsafe_probability == 0.05
    assert "max_unsafe_probability" not in canonical_json(doc)  # ids of scenarios that do not set it are unchanged
    doc["check_policy"] = {"max_unsafe_probability": "2 %"}
    assert parse_scenario(doc).to_core().policy.max_unsafe_probability == pytest.approx(0.02, rel=1e-14)
    doc["check_policy"] = {"max_unsafe_probability": 1.5}
    with pytest.raises(ScenarioError) as exc:
        parse_scenario(doc)
    assert exc.value.field == "check_policy.max_unsafe_probability"


def test_cli_check_samples(doc, tmp_path, capsys):
    _block(doc, {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "2 kJ/mol"})
    path = tmp_path / "s.json"
    path.write_text(json.dumps(doc))
    assert main(["check", str(path), "--samples", "8", "--seed", "2", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    block = out["uncertainty"]
    assert block["samples"] == 8 and block["seed"] == 2
    assert set(block["quantiles"]) == {"temperature_K", "mtsr_K", "tmr_ad_s"}
    assert main(["check", str(path), "--seed", "2"]) == 2
    assert "--samples" in capsys.readouterr().err
