"""The scenario document of a calibration: the fitted values written into the scenario, an ``uncertainty``
block from the fit (DESIGN.md §11, when the format has it) and a record of where it came from.

The fitted document is the canonical one (SI numbers), so its id is its content hash like any scenario's.
"""

from __future__ import annotations

import math
from typing import Any

from exomap.schema.canonical import canonical_dict, scenario_id
from exomap.schema.document import ScenarioDoc


def _set(doc: dict[str, Any], target: Any, value: float, reaction: Any) -> None:
    if target.kind == "rate_constant" or target.kind == "activation_energy":
        r = doc["reactions"][target.index]
        r["pre_exponential"] = float(f"{reaction.k0:.15g}")
        r["activation_energy"] = float(f"{reaction.Ea:.15g}")
    elif target.kind == "reaction_enthalpy":
        doc["reactions"][target.index]["reaction_enthalpy"] = float(f"{value:.15g}")
    elif target.kind == "feed_concentration":
        doc["feed"]["concentrations"][target.species] = float(f"{value:.15g}")
    else:
        section, key = target.kind.split(".")
        doc[section][key] = float(f"{value:.15g}")


def uncertainty_block(result: Any) -> dict[str, Any]:
    """DESIGN.md §11 ``uncertainty`` of a calibration: normal (lognormal for a rate constant, fitted in ln k)
    with the fit's standard errors, the fit's correlations and its reference temperature."""
    params = []
    fit = result.fit
    for t, se_fit in zip(result.targets, fit.standard_errors, strict=True):
        if t.log:
            params.append({"target": t.path, "distribution": "lognormal", "factor": math.exp(float(se_fit))})
        else:
            params.append({"target": t.path, "distribution": "normal", "sd": float(se_fit)})
    corr = []
    n = len(result.targets)
    for i in range(n):
        for j in range(i + 1, n):
            rho = float(fit.correlations[i, j])
            if math.isfinite(rho) and abs(rho) > 1e-6:
                corr.append([result.targets[i].path, result.targets[j].path, max(-1.0, min(1.0, rho))])
    return {"parameters": params, "correlations": corr, "reference_temperature": result.T_ref}


def calibrated_document(
    doc: dict[str, Any] | ScenarioDoc,
    result: Any,
    *,
    dataset_id: str,
    source_id: str | None = None,
    window: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """A new scenario document with the fitted values, the fit's ``uncertainty`` block (when the scenario
    format knows it) and a description saying which scenario and dataset it came from."""
    out = canonical_dict(doc)
    source_id = source_id or scenario_id(out)
    for t, v in zip(result.targets, result.estimates, strict=True):
        reaction = result.scenario.reactions[t.index] if t.index is not None else None
        _set(out, t, float(v), reaction)
    if "uncertainty" in ScenarioDoc.model_fields:
        out["uncertainty"] = uncertainty_block(result)
        from exomap.schema.errors import ScenarioError
        from exomap.schema.parse import parse_scenario

        try:
            parse_scenario(out)
        except ScenarioError as exc:
            # a poorly determined fit can give an uncertainty the format refuses (a correlation of +-1, a normal
            # spread above a fifth of a positive value): the fitted values are still written, without the block
            del out["uncertainty"]
            out["description"] = (
                "The fit's uncertainty could not be written as an uncertainty block "
                f"({exc.errors[0]['field']}: {exc.errors[0]['message']}); see the calibration's warnings. "
                + str(out.get("description", ""))
            )
    fitted = ", ".join(t.path for t in result.targets)
    part = ""
    if window is not None and not window.get("whole", True):
        part = f", records {window['start']} to {window['end']} ({window['records']})"
    note = f"Calibrated from scenario {source_id} on plant dataset {dataset_id}{part} (fitted: {fitted})."
    out["description"] = (note + " " + str(out.get("description", ""))).strip()[:5000]
    title = str(out.get("title", "") or "")
    out["title"] = (title + " (calibrated)")[:200] if not title.endswith("(calibrated)") else title
    return canonical_dict(out)
