"""The scenario's optional ``uncertainty`` block (DESIGN.md §11): documents, unit conversion, checks.

```
"uncertainty": {
  "parameters": [
    {"target": "reactions[0].rate_constant", "distribution": "lognormal", "factor": 1.5},
    {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "3 kJ/mol"},
    {"target": "jacket.ua", "distribution": "uniform", "low": "1.6 kW/K", "high": "2.2 kW/K"}
  ],
  "correlations": [["reactions[0].rate_constant", "reactions[0].activation_energy", -0.3]],
  "reference_temperature": "60 degC",
  "samples": 256,
  "seed": 0
}
```

Decisions written down here (the contract is silent on them)
------------------------------------------------------------
* ``sd`` (normal) and ``low``/``high`` (uniform) take the target's unit: a bare number is SI, a string has
  units. A rate constant's are in its pre-exponential factor's unit (it is k at ``reference_temperature``);
  the coolant temperature's ``sd`` is a temperature difference ("2 K"), its bounds are temperatures.
* ``factor`` (lognormal) is the geometric standard deviation, a plain number >= 1: one standard deviation
  multiplies or divides the nominal value by it.
* ``correlations`` are those of the underlying standard normals (a Gaussian copula), strictly between -1 and 1.
* ``samples`` is a power of two from 8 to 16384 (the Sobol sequence is balanced at those sizes).
* ``reference_temperature`` defaults to the nominal operating temperature: the low stable steady state at the
  scenario's own feed.
* The pre-exponential factor is never a target: it follows from the rate constant and activation energy.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING, Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, StrictFloat, StrictInt, StrictStr, field_validator

from exomap.schema.quantity import QuantityProblem, expected, pre_exponential_to_si, pre_exponential_units, to_si

if TYPE_CHECKING:
    from exomap.schema.document import ScenarioDoc

_TARGET_RE = re.compile(
    r"^(?:reactions\[(\d+)\]\.(rate_constant|activation_energy|reaction_enthalpy)"
    r"|(jacket\.ua|jacket\.coolant_temperature|heat_loss\.ua|liquid\.heat_capacity)|feed\.concentrations\.(.+))$"
)
TARGETS = (
    "reactions[i].rate_constant",
    "reactions[i].activation_energy",
    "reactions[i].reaction_enthalpy",
    "jacket.ua",
    "jacket.coolant_temperature",
    "heat_loss.ua",
    "liquid.heat_capacity",
    "feed.concentrations.X",
)
_DIMENSION = {
    "activation_energy": "molar_energy",
    "reaction_enthalpy": "molar_energy",
    "jacket.ua": "conductance",
    "jacket.coolant_temperature": "temperature",
    "heat_loss.ua": "conductance",
    "liquid.heat_capacity": "specific_heat",
    "concentration": "concentration",
}

Value = StrictFloat | StrictInt | StrictStr


class UncertainParameterDoc(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    target: str = Field(description="Scenario path, e.g. 'reactions[0].activation_energy'.")
    distribution: Literal["normal", "lognormal", "uniform"]
    sd: Value | None = Field(default=None, description="Standard deviation of a normal, in the target's unit.")
    factor: Annotated[float, Field(ge=1.0)] | None = Field(
        default=None, description="Geometric standard deviation of a lognormal (>= 1)."
    )
    low: Value | None = Field(default=None, description="Lower bound of a uniform, in the target's unit.")
    high: Value | None = Field(default=None, description="Upper bound of a uniform, in the target's unit.")


def _power_of_two(n: int) -> int:
    if n < 8 or n > 16384 or n & (n - 1):
        raise ValueError(
            f"expected a power of two from 8 to 16384 (the Sobol sequence is balanced there), e.g. 256; got {n}"
        )
    return n


class UncertaintyDoc(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    parameters: list[UncertainParameterDoc] = Field(default_factory=list)
    correlations: list[tuple[str, str, Annotated[float, Field(gt=-1.0, lt=1.0)]]] = Field(default_factory=list)
    reference_temperature: Value | None = None
    samples: int = 256
    seed: Annotated[int, Field(ge=0, le=2**32 - 1)] = 0

    @field_validator("samples")
    @classmethod
    def _samples(cls, n: int) -> int:
        return _power_of_two(n)


def target_kind(doc: ScenarioDoc, target: str) -> tuple[str | None, int | None, str]:
    """``(kind, index, problem)``: the kind of target (``rate_constant`` ... ``concentration``), the reaction or
    species index, and a message when the path names nothing in this scenario ("" when it is fine)."""
    m = _TARGET_RE.match(target)
    if m is None:
        hint = ""
        if target.endswith("pre_exponential"):
            hint = (
                " (the pre-exponential factor is not sampled on its own: give reactions[i].rate_constant, k at the "
                "reference temperature, and reactions[i].activation_energy)"
            )
        return None, None, f"unknown target {target!r}{hint}; expected one of {', '.join(TARGETS)}"
    if m.group(1) is not None:
        j = int(m.group(1))
        if j >= len(doc.reactions):
            return None, None, f"target {target!r}: the scenario has {len(doc.reactions)} reaction(s)"
        return m.group(2), j, ""
    if m.group(3) is not None:
        kind = m.group(3)
        if kind.startswith("jacket") and doc.jacket is None:
            return None, None, f"target {target!r}: the scenario has no jacket"
        if kind.startswith("heat_loss") and doc.heat_loss is None:
            return None, None, f"target {target!r}: the scenario has no heat_loss"
        return kind, None, ""
    name = m.group(4)
    if name not in doc.species:
        return None, None, f"target {target!r}: unknown species {name!r}; species: {', '.join(doc.species)}"
    return "concentration", doc.species.index(name), ""


def _convert(doc: ScenarioDoc, kind: str, index: int | None, key: str, value: Any) -> float:
    """An SI float from a value given for ``key`` (sd, low, high) of a target; QuantityProblem if it is wrong."""
    if kind == "rate_constant":
        orders = doc.reactions[index].orders  # type: ignore[index]
        return pre_exponential_to_si(value, float(sum(n for s, n in orders.items() if s in doc.species)))
    dim = _DIMENSION[kind]
    if key == "sd" and dim == "temperature":
        dim = "temperature_difference"
    return to_si(value, dim)


def _unit_text(doc: ScenarioDoc, kind: str, index: int | None, key: str) -> str:
    if kind == "rate_constant":
        orders = doc.reactions[index].orders  # type: ignore[index]
        n = float(sum(v for s, v in orders.items() if s in doc.species))
        return f"expected a rate constant in {pre_exponential_units(n)} (the reaction's total order is {n:g})"
    dim = _DIMENSION[kind]
    if key == "sd" and dim == "temperature":
        dim = "temperature_difference"
    return expected(dim)


def to_si_in_place(doc: ScenarioDoc) -> None:
    """Turn every convertible ``sd``/``low``/``high`` of the block into an SI float (canonical form); values
    that do not convert are left for :func:`errors` to report with their field."""
    u = doc.uncertainty
    if u is None:
        return
    if isinstance(u.reference_temperature, (str, int, float)):
        try:
            u.reference_temperature = to_si(u.reference_temperature, "temperature")
        except QuantityProblem:
            pass
    for p in u.parameters:
        kind, index, problem = target_kind(doc, p.target)
        if problem or kind is None:
            continue
        for key in ("sd", "low", "high"):
            value = getattr(p, key)
            if value is None:
                continue
            try:
                setattr(p, key, _convert(doc, kind, index, key, value))
            except QuantityProblem:
                pass


def errors(doc: ScenarioDoc) -> list[dict[str, str]]:
    """Checks of the block that need the rest of the scenario; one message per field, naming the target path
    and the unit expected."""
    u = doc.uncertainty
    out: list[dict[str, str]] = []
    if u is None:
        return out
    if u.reference_temperature is not None:
        try:
            t = to_si(u.reference_temperature, "temperature")
            if not t > 0:
                raise QuantityProblem(f"must be above absolute zero, got {t:g} K; {expected('temperature')}")
        except QuantityProblem as exc:
            out.append({"field": "uncertainty.reference_temperature", "message": str(exc)})
    seen: dict[str, int] = {}
    for i, p in enumerate(u.parameters):
        where = f"uncertainty.parameters[{i}]"
        kind, index, problem = target_kind(doc, p.target)
        if problem or kind is None:
            out.append({"field": f"{where}.target", "message": problem})
            continue
        if p.target in seen:
            out.append(
                {"field": f"{where}.target", "message": f"{p.target} is already given in parameters[{seen[p.target]}]"}
            )
            continue
        seen[p.target] = i
        need = {"normal": ("sd",), "lognormal": ("factor",), "uniform": ("low", "high")}[p.distribution]
        for key in ("sd", "factor", "low", "high"):
            given = getattr(p, key) is not None
            if key in need and not given:
                what = (
                    "a number >= 1 (the geometric standard deviation)"
                    if key == "factor"
                    else _unit_text(doc, kind, index, key)
                )
                out.append(
                    {"field": f"{where}.{key}", "message": f"{p.target}: a {p.distribution} needs {key}; {what}"}
                )
            elif key not in need and given:
                out.append(
                    {
                        "field": f"{where}.{key}",
                        "message": f"{p.target}: {key} does not apply to a {p.distribution} distribution "
                        f"(it takes {', '.join(need)})",
                    }
                )
        for key in ("sd", "low", "high"):
            value = getattr(p, key)
            if value is None or key not in need:
                continue
            try:
                x = _convert(doc, kind, index, key, value)
            except QuantityProblem as exc:
                out.append({"field": f"{where}.{key}", "message": f"{p.target}: {exc}"})
                continue
            if key == "sd" and x < 0:
                out.append({"field": f"{where}.sd", "message": f"{p.target}: sd must not be negative, got {x:g}"})
    names = {p.target for p in u.parameters}
    for k, (a, b, _) in enumerate(u.correlations):
        for t in (a, b):
            if t not in names:
                out.append(
                    {
                        "field": f"uncertainty.correlations[{k}]",
                        "message": f"{t!r} is not one of the uncertain parameters' targets "
                        f"({', '.join(sorted(names)) or 'none given'})",
                    }
                )
                break
        else:
            if a == b:
                out.append({"field": f"uncertainty.correlations[{k}]", "message": f"{a!r} is correlated with itself"})
    return out


def to_spec(doc: ScenarioDoc) -> Any:
    """The core's ``UncertaintySpec`` of a checked document (None without a block)."""
    from exomap.core.uncertainty import UncertainParameter, UncertaintySpec

    u = doc.uncertainty
    if u is None:
        return None

    def si(p: UncertainParameterDoc, key: str) -> float | None:
        value = getattr(p, key)
        if value is None:
            return None
        kind, index, _ = target_kind(doc, p.target)
        return float(_convert(doc, kind, index, key, value))  # type: ignore[arg-type]

    return UncertaintySpec(
        parameters=tuple(
            UncertainParameter(
                target=p.target,
                distribution=p.distribution,
                sd=si(p, "sd"),
                factor=p.factor,
                low=si(p, "low"),
                high=si(p, "high"),
            )
            for p in u.parameters
        ),
        correlations=tuple((a, b, float(r)) for a, b, r in u.correlations),
        T_ref=None if u.reference_temperature is None else float(to_si(u.reference_temperature, "temperature")),
        samples=u.samples,
        seed=u.seed,
    )
