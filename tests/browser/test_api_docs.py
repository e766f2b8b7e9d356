"""The API documentation page (/api/docs) in a browser: every operation listed from the server's own OpenAPI
document, with the request-body example a user can send as it is.

The server and the browser are the session's (tests/browser/conftest.py).
"""

from __future__ import annotations

import json
from typing import Any

import httpx
import pytest

pytestmark = pytest.mark.browser

TIMEOUT = 60_000


def test_the_docs_page_lists_every_operation_with_a_sendable_scenario_example(
    server: str, api: httpx.Client, page: Any
) -> None:
    spec = api.get("/api/v1/openapi.json").json()
    page.goto(server + "/api/docs")
    page.wait_for_selector("details.op", timeout=TIMEOUT)
    shown = page.eval_on_selector_all(
        "details.op summary", "els => els.map(e => [e.children[0].textContent, e.children[1].textContent])"
    )
    expected = [[m.upper(), p] for p, item in spec["paths"].items() for m in item]
    assert shown == expected
    # POST /scenarios: its body schema is the scenario document's ($ref) with the example beside it; the page
    # shows that example (not an empty object), and every answer the contract lists, 408/414/431 included
    save = page.locator("details.op", has=page.locator("summary", has_text="/api/v1/scenarios")).filter(
        has=page.locator(".method", has_text="POST")
    )
    save.locator("summary").click()
    example = json.loads(save.locator("textarea").input_value())
    assert (
        example
        == spec["paths"]["/api/v1/scenarios"]["post"]["requestBody"]["content"]["application/json"]["schema"][
            "examples"
        ][0]
    )
    assert example["format"] == "exomap-scenario/1"
    answers = save.locator("p", has_text="answers:").inner_text()
    for status in ("201", "422", "408", "414", "431"):
        assert status in answers
    # and it is accepted as it is: Send stores it (or finds it stored)
    save.locator("button", has_text="Send").click()
    page.wait_for_function(
        "el => /^(200|201) /.test(el.textContent)", arg=save.locator("pre.answer").element_handle(), timeout=TIMEOUT
    )
