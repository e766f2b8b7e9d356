"""The OpenAPI document is the API's contract: committed as docs/openapi.json, valid, typed all the way down,
with one naming rule for its operations and the shared error shape on every error answer.

Refresh the committed document after a deliberate change with ``make openapi`` (see README, "JSON API"), and
bump ``exomap.web.api.API_VERSION`` by its rule.
"""

from __future__ import annotations

import difflib
import json
import re
from pathlib import Path
from typing import Any

import pytest
from exomap.web import apidocs
from exomap.web.api import API_VERSION
from openapi_spec_validator import validate

COMMITTED = Path(__file__).resolve().parents[2] / "docs" / "openapi.json"
REFRESH = "make openapi  (= python -m exomap.web.apidocs docs/openapi.json)"
#: The naming rule of operation ids (README, "JSON API").
OPERATION_ID = re.compile(r"^(get|list|save|compute)[A-Z][A-Za-z]*$")


@pytest.fixture(scope="module")
def spec() -> dict[str, Any]:
    return apidocs.document()


def operations(spec: dict[str, Any]) -> list[tuple[str, str, dict[str, Any]]]:
    return [(path, method, op) for path, item in spec["paths"].items() for method, op in item.items()]


def test_the_committed_document_is_the_generated_one(spec: dict[str, Any]) -> None:
    generated = apidocs.document_text()
    committed = COMMITTED.read_text(encoding="utf-8") if COMMITTED.exists() else ""
    if generated != committed:
        diff = difflib.unified_diff(
            committed.splitlines(), generated.splitlines(), "docs/openapi.json (committed)", "generated", lineterm=""
        )
        shown = "\n".join(list(diff)[:150])
        pytest.fail(
            f"the API's OpenAPI document changed; if that is meant, run `{REFRESH}`, commit docs/openapi.json "
            f"and bump API_VERSION ({API_VERSION}) by its rule (exomap.web.api). Diff (first 150 lines):\n{shown}"
        )


def test_the_document_is_valid_openapi(spec: dict[str, Any]) -> None:
    validate(spec)  # openapi-spec-validator: raises on any violation of the OpenAPI 3.1 schema
    assert spec["openapi"].startswith("3.1")
    assert spec["info"]["version"] == API_VERSION
    assert re.fullmatch(r"\d+\.\d+\.\d+", API_VERSION)
    # the major version is the routes' prefix
    assert all(path.startswith(f"/api/v{API_VERSION.split('.')[0]}/") for path in spec["paths"])


def test_operation_ids_follow_the_one_rule_and_every_operation_has_a_tag(spec: dict[str, Any]) -> None:
    ids = [op["operationId"] for _, _, op in operations(spec)]
    assert len(ids) == len(set(ids)), "operation ids must be unique"
    for path, method, op in operations(spec):
        assert OPERATION_ID.match(op["operationId"]), f"{method.upper()} {path}: {op['operationId']!r}"
        assert len(op.get("tags", [])) == 1, f"{method.upper()} {path} needs one tag"
        assert op.get("summary"), f"{method.upper()} {path} needs a summary"
    # the GET twin of a computation and its POST share the tag and the noun
    for kind in ("steady", "branch", "map", "check", "simulate"):
        get = spec["paths"][f"/api/v1/scenarios/{{scenario_id}}/{kind}"]["get"]
        post = spec["paths"][f"/api/v1/{kind}"]["post"]
        assert (get["operationId"], post["operationId"]) == (f"get{kind.title()}", f"compute{kind.title()}")
        assert get["tags"] == post["tags"] == [kind]


def test_every_answer_has_a_named_schema_and_every_error_the_shared_shape(spec: dict[str, Any]) -> None:
    for path, method, op in operations(spec):
        where = f"{method.upper()} {path}"
        for status, answer in op["responses"].items():
            schema = answer["content"]["application/json"]["schema"]
            if int(status) >= 400:
                assert schema == {"$ref": "#/components/schemas/ErrorBody"}, (where, status)
            else:
                members = schema.get("anyOf", [schema])
                named = all(set(m) == {"$ref"} for m in members) and set(schema) <= {"$ref", "anyOf", "title"}
                assert named, f"{where} {status}: the answer needs a model (or a union of models), got {schema}"
        # every route refuses an undeclared query parameter (exomap.web.query)
        assert "422" in op["responses"], where


def test_no_framework_default_body_is_documented(spec: dict[str, Any]) -> None:
    text = json.dumps(spec)
    assert "HTTPValidationError" not in text
    assert '"ValidationError"' not in text


def _walk(node: Any, where: str) -> list[str]:
    """Places where a schema is an array without items or an object without a shape."""
    found: list[str] = []
    if isinstance(node, dict):
        if node.get("type") == "array" and "items" not in node and "prefixItems" not in node:
            found.append(where)
        for key, value in node.items():
            found += _walk(value, f"{where}/{key}")
    elif isinstance(node, list):
        for i, value in enumerate(node):
            found += _walk(value, f"{where}[{i}]")
    return found


def test_every_array_says_what_it_holds(spec: dict[str, Any]) -> None:
    assert _walk(spec, "#") == []


def test_every_answer_object_is_closed(spec: dict[str, Any]) -> None:
    """Answer models close their objects (additionalProperties false), so a generated client is exact."""
    from exomap.web.answers import Answer

    names: set[str] = set()
    todo = [Answer]
    while todo:
        cls = todo.pop()
        names.add(cls.__name__)
        todo.extend(cls.__subclasses__())
    schemas = spec["components"]["schemas"]
    for name in names & set(schemas):
        assert schemas[name].get("additionalProperties") is False, name


def _free_objects(node: Any, where: str) -> list[str]:
    """Places where a schema is an object anything may fill (no properties, any additional property), or an
    array of anything (``items: {}``)."""
    found: list[str] = []
    if isinstance(node, dict):
        if (
            node.get("type") == "object"
            and "properties" not in node
            and node.get("additionalProperties") in (True, None)
        ):
            found.append(where)
        if node.get("type") == "array" and node.get("items") == {}:
            found.append(where)
        for key, value in node.items():
            found += _free_objects(value, f"{where}/{key}")
    elif isinstance(node, list):
        for i, value in enumerate(node):
            found += _free_objects(value, f"{where}[{i}]")
    return found


def test_every_request_body_is_typed(spec: dict[str, Any]) -> None:
    """A request body says what it takes: an inline scenario is the scenario document's own schema, an event is
    one of the event forms; no free-form object or array of anything."""
    schemas = spec["components"]["schemas"]
    roots: list[tuple[str, Any]] = []
    for path, method, op in operations(spec):
        for media, content in op.get("requestBody", {}).get("content", {}).items():
            if media == "application/json":
                roots.append((f"{method.upper()} {path}", content["schema"]))
    seen: set[str] = set()
    found: list[str] = []
    while roots:
        where, node = roots.pop()
        found += _free_objects(node, where)
        for ref in re.findall(r'"#/components/schemas/(\w+)"', json.dumps(node)):
            if ref not in seen:
                seen.add(ref)
                roots.append((ref, schemas[ref]))
    assert "ScenarioDoc" in seen  # POST /scenarios and every inline scenario
    assert found == []


def test_the_event_forms_are_the_cores(spec: dict[str, Any]) -> None:
    from exomap.core.events import ACTIONS, FORMS

    items = spec["components"]["schemas"]["SimulateRequest"]["properties"]["events"]["items"]["anyOf"]
    objects = [s for s in items if s.get("type") == "object"]
    # one object form per kind of event (exomap.core.events.FORMS), with the keys that kind needs, and the text form
    assert sorted(next(k for k in s["required"] if k in FORMS) for s in objects) == sorted(FORMS)
    for s in objects:
        kind = next(k for k in s["required"] if k in FORMS)
        assert set(s["required"]) == {"at", kind, *FORMS[kind]}, s["title"]
        assert s["additionalProperties"] is False
    do = next(s for s in objects if "do" in s["required"])
    assert do["properties"]["do"]["enum"] == list(ACTIONS)
    assert any(s.get("type") == "string" for s in items)


def test_the_connection_layers_answers_are_listed_on_every_operation(spec: dict[str, Any]) -> None:
    # 408 (slow head or body), 414 (long URL), 431 (large head): exomap.web.protocol and BodyLimit
    for path, method, op in operations(spec):
        for status in ("408", "414", "431"):
            answer = op["responses"].get(status)
            assert answer is not None, f"{method.upper()} {path} {status}"
            assert answer["content"]["application/json"]["schema"] == {"$ref": "#/components/schemas/ErrorBody"}
