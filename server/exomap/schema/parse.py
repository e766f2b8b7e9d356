"""``parse_scenario``: a JSON document in, a validated ``ScenarioDoc`` out, or one ``ScenarioError`` with one
plain message per field (pydantic's own errors are reshaped here, never passed on raw)."""

from __future__ import annotations

import types
import typing
from typing import Any

from pydantic import BaseModel, ValidationError

from exomap.schema.convert import cross_check, raw_species_errors, to_core
from exomap.schema.document import Dim, ScenarioDoc
from exomap.schema.errors import ScenarioError
from exomap.schema.quantity import expected


def field_path(loc: tuple[Any, ...]) -> str:
    """('reactions', 0, 'orders', 'A') -> 'reactions[0].orders.A'."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "scenario"


def _unwrap(tp: Any) -> tuple[Any, list[Any]]:
    """Strip Optional and Annotated; return (type, metadata)."""
    meta: list[Any] = []
    while True:
        origin = typing.get_origin(tp)
        if origin is typing.Annotated:
            args = typing.get_args(tp)
            tp, meta = args[0], meta + list(args[1:])
        elif origin in (typing.Union, types.UnionType):
            args = [a for a in typing.get_args(tp) if a is not type(None)]
            tp = args[0] if len(args) == 1 else tp
            if len(args) != 1:
                return tp, meta
        else:
            return tp, meta


def _walk(loc: tuple[Any, ...]) -> tuple[Any, list[Any], type[BaseModel] | None]:
    """The annotation at ``loc`` in ScenarioDoc: (type, metadata, enclosing model)."""
    tp: Any = ScenarioDoc
    meta: list[Any] = []
    parent: type[BaseModel] | None = None
    for part in loc:
        tp, meta = _unwrap(tp)
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            parent = tp
            info = tp.model_fields.get(str(part))
            if info is None:
                return None, [], parent
            tp = info.annotation
            meta = list(info.metadata)
            continue
        origin = typing.get_origin(tp)
        args = typing.get_args(tp)
        if origin is list and args:
            tp = args[0]
        elif origin is dict and args:
            tp = args[1]
        elif origin is tuple and args and isinstance(part, int) and part < len(args):
            tp = args[part]
        else:
            return None, [], parent
    inner, more = _unwrap(tp)
    return inner, meta + more, parent


def _what(tp: Any, meta: list[Any]) -> str:
    """What a field expects, in words."""
    for m in meta:
        if isinstance(m, Dim):
            return expected(m.dimension)
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return "expected an object with " + ", ".join(tp.model_fields)
    origin = typing.get_origin(tp)
    if origin is typing.Literal:
        return "expected one of " + ", ".join(map(str, typing.get_args(tp)))
    if origin is list:
        return "expected a list"
    if origin is tuple:
        return f"expected a list of {len(typing.get_args(tp))} values"
    if origin is dict:
        return "expected an object {name: value}"
    if tp is float:
        return "expected a number"
    if tp is int:
        return "expected a whole number"
    if tp is str:
        return "expected text"
    if tp is bool:
        return "expected true or false"
    return "expected a value"


def _message(err: dict[str, Any]) -> str:
    kind = err["type"]
    loc = tuple(err["loc"])
    ctx = err.get("ctx") or {}
    if kind in ("quantity", "text"):
        return str(ctx.get("text", err["msg"]))
    tp, meta, parent = _walk(loc)
    what = _what(tp, meta)
    if kind == "missing":
        return f"required field is missing; {what}"
    if kind == "extra_forbidden":
        allowed = ", ".join(parent.model_fields) if parent else ""
        return f"unknown field; expected one of: {allowed}"
    if kind == "value_error":
        return str(ctx.get("error", err["msg"]))
    if kind in ("too_short", "too_long") and loc in (("reactions",), ("species",)):
        return f"at least one {'reaction' if loc[0] == 'reactions' else 'species'} is needed"
    if kind == "finite_number":
        return f"not a finite number; {what}"
    if kind in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        bound = next(iter(ctx.values()), "")
        words = {
            "greater_than": "above",
            "greater_than_equal": "at least",
            "less_than": "below",
            "less_than_equal": "at most",
        }[kind]
        return f"must be {words} {bound}; {what}"
    if kind == "string_too_long":
        return f"too long: at most {ctx.get('max_length')} characters, got {len(str(err.get('input', '')))}"
    if kind == "string_pattern_mismatch":
        return 'a species name is one word without dots or brackets, e.g. "A" or "MeOH"'
    if kind == "literal_error":
        return f"got {err.get('input')!r}; {what}"
    if kind.endswith(("_type", "_parsing")):
        return f"got {_shown(err.get('input'))}; {what}"
    return f"{err['msg'].rstrip('.')}; {what}"


def _shown(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def reshape(exc: ValidationError) -> ScenarioError:
    """One plain message per field from a pydantic ValidationError."""
    errors: list[dict[str, str]] = []
    for err in exc.errors(include_url=False):
        loc = tuple(err["loc"])
        # pydantic reports a failed tagged/Optional branch with an extra loc element naming the type
        loc = tuple(p for p in loc if not (isinstance(p, str) and p[:1].isupper() and p.endswith("Doc")))
        path = field_path(loc)
        if any(e["field"] == path for e in errors):
            continue
        errors.append({"field": path, "message": _message({**err, "loc": loc})})
    return ScenarioError(errors)


def parse_scenario(doc: Any) -> ScenarioDoc:
    """Validate a scenario document (a dict decoded from JSON) and return a ``ScenarioDoc``.

    Checks each field's type, unit and sign, the species named in reactions and feed, the cross-field
    relations (limits, windows) and the core's own domain checks (``exomap.core.scenario.validate``).

    Raises
    ------
    ScenarioError
        With ``.errors`` = ``[{"field": "vessel.diameter", "message": "..."}]``, one per field.

    Examples
    --------
    >>> parse_scenario({"species": []}).title  # doctest: +IGNORE_EXCEPTION_DETAIL
    Traceback (most recent call last):
    exomap.schema.errors.ScenarioError: species: at least one species is needed; ...
    """
    if isinstance(doc, ScenarioDoc):
        return doc
    if not isinstance(doc, dict):
        raise ScenarioError.single("scenario", f"expected a JSON object, got {type(doc).__name__}")
    try:
        model = ScenarioDoc.model_validate(doc, context={"species": doc.get("species")})
    except ValidationError as exc:
        # every field error at once: an undeclared species (a typo) first, then what pydantic found
        found = reshape(exc).errors
        species_ok = not any(e["field"] == "species" or e["field"].startswith("species[") for e in found)
        errors = raw_species_errors(doc) if species_ok else []
        fields = {e["field"] for e in errors}
        errors += [e for e in found if e["field"] not in fields]
        raise ScenarioError(errors) from None
    errors = cross_check(model)
    if errors:
        raise ScenarioError(errors)
    to_core(model)  # the core's domain checks, reported with the same field names
    return model
