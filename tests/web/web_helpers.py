"""Assertion helpers of the web tests."""

from __future__ import annotations

from typing import Any


def assert_error(response: Any, status: int, code: str, field: str | None = None) -> dict[str, Any]:
    """The one assertion every error answer goes through: the shared shape, the status, the code, no trace."""
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith("application/json"), response.headers["content-type"]
    body = response.json()
    assert set(body) == {"error"}, body
    err = body["error"]
    assert set(err) == {"status", "code", "message", "fields"}, err
    assert err["status"] == status
    assert err["code"] == code, err
    assert isinstance(err["message"], str) and err["message"].strip()
    assert isinstance(err["fields"], list)
    for f in err["fields"]:
        assert set(f) == {"field", "message"}, f
        assert isinstance(f["field"], str) and f["field"]
        assert isinstance(f["message"], str) and f["message"]
    names = [f["field"] for f in err["fields"]]
    assert len(names) == len(set(names)), f"one message per field, got {names}"
    if field is not None:
        assert field in names, (field, names)
    assert "Traceback" not in response.text and 'File "' not in response.text
    return err
