"""Canonical JSON of a scenario and its id.

The canonical form is the validated document with every default filled in and every quantity an SI float
(K, Pa, m^3/s, ...; Kv in m^3/h), keys sorted, compact separators, fields that are absent or null left out.
Because a ``ScenarioDoc`` already holds SI floats and JSON floats print with ``repr`` (shortest exact form),
``canonical_json(parse_scenario(json.loads(canonical_json(d)))) == canonical_json(d)`` for every valid ``d``.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from exomap.schema.document import ScenarioDoc
from exomap.schema.parse import parse_scenario


def canonical_dict(doc: dict[str, Any] | ScenarioDoc) -> dict[str, Any]:
    """The canonical document as a plain dict (SI floats, defaults filled, nulls dropped)."""
    model = parse_scenario(doc)
    return model.model_dump(mode="json", exclude_none=True)


def canonical_json(doc: dict[str, Any] | ScenarioDoc) -> str:
    """Canonical JSON text of a scenario (a dict is parsed first; raises ScenarioError if invalid).

    >>> from exomap.schema import canonical_json  # doctest: +SKIP
    """
    return json.dumps(canonical_dict(doc), sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def scenario_id(doc: dict[str, Any] | ScenarioDoc) -> str:
    """First 16 hex characters of the SHA-256 of the canonical JSON (UTF-8)."""
    return hashlib.sha256(canonical_json(doc).encode("utf-8")).hexdigest()[:16]
