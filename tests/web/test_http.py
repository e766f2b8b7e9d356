"""Plain routes, security headers, CORS, the body limit, the OpenAPI document and the offline docs page."""

from __future__ import annotations

import re

import exomap
from exomap.web.middleware import CONTENT_SECURITY_POLICY
from web_helpers import assert_error

EXTERNAL = re.compile(r"(https?:)?//[a-z0-9.-]+\.[a-z]{2,}", re.IGNORECASE)


def test_health_and_version(client) -> None:
    assert client.get("/api/v1/health").json() == {"status": "ok"}
    assert client.get("/api/v1/version").json() == {
        "version": exomap.__version__,
        "scenario_format": "exomap-scenario/1",
    }


def test_security_headers_on_answers_errors_and_docs(client) -> None:
    for response in (
        client.get("/api/v1/health"),
        client.get("/api/v1/nowhere"),
        client.get("/api/docs"),
        client.post("/api/v1/steady", content=b"x" * 1_000_001),
    ):
        assert response.headers["x-content-type-options"] == "nosniff"
        assert response.headers["x-frame-options"] == "DENY"
        assert response.headers["referrer-policy"] == "no-referrer"
        assert response.headers["content-security-policy"] == CONTENT_SECURITY_POLICY
    # only this server may serve scripts, and no eval
    assert "script-src 'self';" in CONTENT_SECURITY_POLICY
    assert "unsafe-eval" not in CONTENT_SECURITY_POLICY
    assert "frame-ancestors 'none'" in CONTENT_SECURITY_POLICY


def test_cors_is_closed_unless_configured(make_client, tmp_path) -> None:
    closed = make_client()
    response = closed.get("/api/v1/health", headers={"Origin": "http://127.0.0.1:9999"})
    assert "access-control-allow-origin" not in response.headers
    preflight = closed.options(
        "/api/v1/steady", headers={"Origin": "http://127.0.0.1:9999", "Access-Control-Request-Method": "POST"}
    )
    assert "access-control-allow-origin" not in preflight.headers

    open_ = make_client(data_dir=tmp_path / "other", cors_origins=["http://127.0.0.1:9999"])
    allowed = open_.get("/api/v1/health", headers={"Origin": "http://127.0.0.1:9999"})
    assert allowed.headers["access-control-allow-origin"] == "http://127.0.0.1:9999"
    other = open_.get("/api/v1/health", headers={"Origin": "http://127.0.0.1:9998"})
    assert "access-control-allow-origin" not in other.headers


def test_body_limit_counts_streamed_bodies_too(make_client) -> None:
    client = make_client(max_body_bytes=2000)

    def chunks():
        for _ in range(10):
            yield b" " * 500

    # no Content-Length: the body is streamed in chunks and refused once it passes the limit
    response = client.post("/api/v1/steady", content=chunks(), headers={"content-type": "application/json"})
    assert_error(response, 413, "body_too_large")
    small = client.post("/api/v1/steady", json={"scenario_id": "0123456789abcdef"})
    assert_error(small, 404, "not_found")  # under the limit the request goes through


def test_openapi_has_an_example_for_every_request_body(client) -> None:
    spec = client.get("/api/v1/openapi.json").json()
    bodies = 0
    for path, item in spec["paths"].items():
        for method, op in item.items():
            body = op.get("requestBody")
            if body is None:
                continue
            if "application/json" not in body["content"]:
                # the plant-data upload takes the CSV file itself: described, with no JSON example
                assert body.get("description"), f"{method.upper()} {path} does not say what its body is"
                continue
            bodies += 1
            content = body["content"]["application/json"]
            schema = content["schema"]
            if "$ref" in schema and "examples" not in schema:  # an example beside the $ref is the body's own
                schema = spec["components"]["schemas"][schema["$ref"].rsplit("/", 1)[1]]
            examples = (
                content.get("examples")
                or schema.get("examples")
                or ([content["example"]] if "example" in content else [])
            )
            assert examples, f"{method.upper()} {path} has no request example"
    # POST scenarios, steady, branch, map, check, simulate, compare, replay, overlay, calibrate
    assert bodies == 10


def test_request_examples_are_valid_requests(client) -> None:
    """Every request example of the OpenAPI document is answered 200/201 (the examples are not made up)."""
    spec = client.get("/api/v1/openapi.json").json()
    for path, item in spec["paths"].items():
        for method, op in item.items():
            if "requestBody" not in op or "application/json" not in op["requestBody"]["content"]:
                continue
            content = op["requestBody"]["content"]["application/json"]
            schema = content["schema"]
            if "$ref" in schema and "examples" not in schema:  # an example beside the $ref is the body's own
                schema = spec["components"]["schemas"][schema["$ref"].rsplit("/", 1)[1]]
            example = (content.get("examples") or schema.get("examples"))[0]
            if isinstance(example, dict) and "value" in example and len(example) <= 3 and "summary" in example:
                example = example["value"]
            if path.endswith("/map"):
                example = {**example, "points": [12, 12]}  # keep the test quick; the example's grid is larger
            if "dataset_id" in example:
                # the example names a stored dataset: store the tests' invented one and use its id
                from test_answers import PLANT_CSV, PLANT_MAP

                stored = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode())
                assert stored.status_code in (200, 201), stored.text
                example = {**example, "dataset_id": stored.json()["dataset_id"]}
                if path.endswith("/calibrate"):
                    example = {**example, "fit": ["jacket.ua"], "reference_temperature": "80 degC"}
            response = client.request(method.upper(), path, json=example)
            assert response.status_code in (200, 201), (path, response.text[:500])


def test_docs_page_works_offline(client) -> None:
    page = client.get("/api/docs")
    assert page.status_code == 200
    assert page.headers["content-type"].startswith("text/html")
    script_src = re.findall(r'<script[^>]*src="([^"]+)"', page.text)
    styles = re.findall(r'<link[^>]*rel="stylesheet"[^>]*href="([^"]+)"', page.text)
    assert script_src == ["/api/docs/docs.js"]
    assert styles == ["/api/docs/docs.css"]
    for url in script_src + styles:
        asset = client.get(url)
        assert asset.status_code == 200
        assert not EXTERNAL.search(asset.text), f"{url} refers to another host"
    assert not EXTERNAL.search(page.text), "the docs page refers to another host"
    # FastAPI's CDN-backed pages are off
    assert_error(client.get("/docs"), 404, "not_found")
    assert_error(client.get("/redoc"), 404, "not_found")
    # the script reads this server's own OpenAPI document
    assert "/api/v1/openapi.json" in client.get("/api/docs/docs.js").text
    assert client.get("/api/v1/openapi.json").status_code == 200


def test_docs_page_shows_the_cautions(client) -> None:
    import html

    from exomap.core.cautions import CAUTIONS

    page = html.unescape(client.get("/api/docs").text)
    for sentence in CAUTIONS:
        assert sentence in page


def test_other_responses_are_gzipped_by_the_middleware(client, saved_id) -> None:
    document = client.get(f"/api/v1/scenarios/{saved_id}", headers={"Accept-Encoding": "gzip"})
    assert len(document.content) > 1000  # over the middleware's minimum size
    assert document.headers["content-encoding"] == "gzip"
    small = client.get("/api/v1/health", headers={"Accept-Encoding": "gzip"})
    assert "content-encoding" not in small.headers  # under the minimum size: sent as it is
