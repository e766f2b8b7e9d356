"""The API documentation page, ``/api/docs``, served entirely by this server (no CDN: plants are often
air-gapped).

FastAPI's built-in docs pages load their scripts from a CDN, so they are switched off. This page is a small
HTML shell plus one ES module that reads the app's own OpenAPI document (``/api/v1/openapi.json``) and lists
every operation with its parameters, its request-body example and a form to send it to this server. It is
written for this API rather than a general OpenAPI browser, and has no third-party code.

The OpenAPI document itself is FastAPI's, less the framework's default 422 body (``HTTPValidationError``),
which this API never sends: every failure has the shape of ``exomap.web.errors.ErrorBody``; and it lists the
connection layer's 408, 414 and 431 on every operation. The document is the
API's contract and is committed as ``docs/openapi.json``; ``make openapi`` (``python -m exomap.web.apidocs
docs/openapi.json``) refreshes it, and ``tests/web/test_contract.py`` fails with a diff when they differ.
"""

from __future__ import annotations

import html
import json
import sys
import tempfile
from pathlib import Path
from typing import Any

from fastapi import FastAPI
from fastapi.responses import HTMLResponse, Response

DOCS_PATH = "/api/docs"
OPENAPI_PATH = "/api/v1/openapi.json"

PAGE = """<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>exomap API</title>
<link rel="icon" href="data:,">
<link rel="stylesheet" href="/api/docs/docs.css">
<link rel="alternate" type="application/json" href="/api/v1/openapi.json">
<script type="module" src="/api/docs/docs.js"></script>
</head>
<body>
<header>
<h1>exomap JSON API</h1>
<p>Every answer is the same document as the command line's <code>--json</code>. Quantities are numbers in SI
base units or strings with units (<code>"40 min"</code>, <code>"35 degC"</code>). Machine-readable description:
<a href="/api/v1/openapi.json">openapi.json</a>.</p>
<p class="caution">{cautions}</p>
</header>
<main id="operations"><p>Loading the API description&hellip;</p></main>
</body>
</html>
"""

CSS = """
body { font: 15px/1.45 system-ui, sans-serif; margin: 0 auto; max-width: 64rem; padding: 1rem; color: #1d232a; }
h1 { font-size: 1.5rem; margin-bottom: .3rem; }
code, pre, textarea { font: 13px/1.4 ui-monospace, monospace; }
.caution { border-left: 4px solid #8a5a00; padding: .4rem .8rem; background: #fbf6ea; }
details.op { border: 1px solid #c9ced4; border-radius: 4px; margin: .5rem 0; }
details.op > summary { cursor: pointer; padding: .5rem .7rem; list-style: none; }
.method { display: inline-block; min-width: 4.2rem; font-weight: 600; }
.path { font-family: ui-monospace, monospace; }
.op-body { padding: 0 .8rem .8rem; }
table { border-collapse: collapse; width: 100%; }
td, th { text-align: left; border-bottom: 1px solid #e3e6ea; padding: .25rem .4rem; vertical-align: top; }
textarea { width: 100%; min-height: 9rem; box-sizing: border-box; }
input[type=text] { width: 100%; box-sizing: border-box; }
pre.answer { background: #f3f5f7; padding: .5rem; max-height: 24rem; overflow: auto; white-space: pre-wrap; }
button { padding: .3rem .9rem; }
"""

SCRIPT = r"""
// Reads this server's OpenAPI document and lists its operations. No third-party code.
const OPENAPI = "/api/v1/openapi.json";

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) node.setAttribute(k, v);
  for (const c of children) node.append(c instanceof Node ? c : document.createTextNode(String(c)));
  return node;
}

function resolveRef(spec, schema) {
  if (schema && schema.$ref) {
    const parts = schema.$ref.replace(/^#\//, "").split("/");
    return parts.reduce((o, p) => (o ? o[p] : undefined), spec);
  }
  return schema;
}

function bodyExample(spec, op) {
  const content = op.requestBody && op.requestBody.content && op.requestBody.content["application/json"];
  if (!content) return null;
  if (content.example !== undefined) return content.example;
  if (content.examples) {
    const first = Object.values(content.examples)[0];
    if (first && first.value !== undefined) return first.value;
  }
  const own = content.schema || {};
  if (own.examples && own.examples.length) return own.examples[0];  // beside a $ref (POST /scenarios)
  const schema = resolveRef(spec, own) || {};
  if (schema.examples && schema.examples.length) return schema.examples[0];
  if (schema.example !== undefined) return schema.example;
  return {};
}

function parameterRows(op, inputs) {
  const rows = [];
  for (const p of op.parameters || []) {
    const input = el("input", { type: "text", name: p.name, placeholder: p.required ? "required" : "" });
    inputs.push([p, input]);
    rows.push(el("tr", {}, el("td", {}, el("code", {}, p.name), p.required ? " *" : ""), el("td", {}, p.in),
      el("td", {}, p.description || ""), el("td", {}, input)));
  }
  if (!rows.length) return null;
  return el("table", {}, el("tr", {}, el("th", {}, "name"), el("th", {}, "in"), el("th", {}, "meaning"),
    el("th", {}, "value")), ...rows);
}

async function send(method, path, inputs, textarea, out) {
  let url = path;
  const query = new URLSearchParams();
  for (const [p, input] of inputs) {
    if (!input.value) continue;
    if (p.in === "path") url = url.replace("{" + p.name + "}", encodeURIComponent(input.value));
    else if (p.in === "query") query.append(p.name, input.value);
  }
  if ([...query].length) url += "?" + query.toString();
  const init = { method, headers: {} };
  if (textarea) { init.body = textarea.value; init.headers["Content-Type"] = "application/json"; }
  out.textContent = method + " " + url + " ...";
  const started = performance.now();
  try {
    const response = await fetch(url, init);
    const text = await response.text();
    let shown = text;
    try { shown = JSON.stringify(JSON.parse(text), null, 2); } catch (e) { /* CSV or plain text */ }
    const ms = Math.round(performance.now() - started);
    out.textContent = response.status + " " + response.statusText + " (" + ms + " ms)\n\n" + shown;
  } catch (e) {
    out.textContent = "request failed: " + e;
  }
}

function operation(spec, path, method, op) {
  const inputs = [];
  const body = el("div", { class: "op-body" });
  if (op.description) body.append(el("p", {}, op.description));
  const params = parameterRows(op, inputs);
  if (params) body.append(params);
  let textarea = null;
  const example = bodyExample(spec, op);
  if (example !== null) {
    textarea = el("textarea", { spellcheck: "false", "aria-label": "request body" });
    textarea.value = JSON.stringify(example, null, 2);
    body.append(el("p", {}, "Request body (example):"), textarea);
  }
  const out = el("pre", { class: "answer", "aria-live": "polite" });
  const button = el("button", { type: "button" }, "Send");
  button.addEventListener("click", () => send(method.toUpperCase(), path, inputs, textarea, out));
  const codes = Object.keys(op.responses || {}).join(", ");
  body.append(el("p", {}, button, "  answers: " + codes), out);
  return el("details", { class: "op" },
    el("summary", {}, el("span", { class: "method" }, method.toUpperCase()), el("span", { class: "path" }, path),
      "  " + (op.summary || "")), body);
}

async function main() {
  const root = document.getElementById("operations");
  try {
    const spec = await (await fetch(OPENAPI)).json();
    root.replaceChildren(el("p", {}, spec.info.title + " " + spec.info.version));
    for (const [path, item] of Object.entries(spec.paths)) {
      for (const [method, op] of Object.entries(item)) root.append(operation(spec, path, method, op));
    }
  } catch (e) {
    root.replaceChildren(el("p", {}, "Could not load the API description: " + e));
  }
}

main();
"""


#: The framework's default validation-error schemas (never sent by this API).
FRAMEWORK_SCHEMAS = ("HTTPValidationError", "ValidationError")


def _without_framework_errors(doc: dict[str, Any]) -> dict[str, Any]:
    """Drop FastAPI's default 422 answer from every operation, and its schemas.

    FastAPI adds it to an operation with parameters that does not list a 422 of its own. Where a route can
    answer 422, it lists the shared error shape (``error_responses(422)``), which FastAPI keeps.
    """
    ref = "#/components/schemas/HTTPValidationError"
    for item in doc.get("paths", {}).values():
        for op in item.values():
            answer = op.get("responses", {}).get("422")
            if answer is not None and ref in json.dumps(answer):
                del op["responses"]["422"]
    schemas = doc.get("components", {}).get("schemas", {})
    for name in FRAMEWORK_SCHEMAS:
        schemas.pop(name, None)
    return doc


#: Answers of the connection layer (``exomap.web.protocol`` and the body deadline of
#: ``exomap.web.middleware.BodyLimit``), possible on every operation before any route runs.
CONNECTION_ERRORS = {
    "408": "The request head, or its body, did not arrive within the server's timeout (a slow or silent client).",
    "414": "The request line (the URL) is longer than the server's limit (EXOMAP_MAX_URL_BYTES).",
    "431": "The request head is larger than the server's limit (EXOMAP_MAX_HEADER_BYTES).",
}


def _with_connection_errors(doc: dict[str, Any]) -> dict[str, Any]:
    """List 408, 414 and 431 (the shared error shape) on every operation: the server may answer any request so."""
    body = {"application/json": {"schema": {"$ref": "#/components/schemas/ErrorBody"}}}
    for item in doc.get("paths", {}).values():
        for op in item.values():
            responses = op.setdefault("responses", {})
            for status, description in CONNECTION_ERRORS.items():
                responses.setdefault(status, {"description": description, "content": body})
    return doc


def install(app: FastAPI) -> None:
    """Add ``/api/docs`` and its two files to ``app``, and clean its OpenAPI document."""

    generate = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is None:
            app.openapi_schema = _with_connection_errors(_without_framework_errors(generate()))
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]

    from exomap.core.cautions import CAUTIONS  # the one place of the cautions (DESIGN.md §9)

    page = PAGE.replace("{cautions}", html.escape(" ".join(CAUTIONS)))

    @app.get(DOCS_PATH, include_in_schema=False)
    async def api_docs() -> HTMLResponse:
        return HTMLResponse(page)

    @app.get(DOCS_PATH + "/docs.js", include_in_schema=False)
    async def api_docs_script() -> Response:
        return Response(SCRIPT, media_type="text/javascript; charset=utf-8")

    @app.get(DOCS_PATH + "/docs.css", include_in_schema=False)
    async def api_docs_style() -> Response:
        return Response(CSS, media_type="text/css; charset=utf-8")


def document() -> dict[str, Any]:
    """The OpenAPI document of an app with default settings (on a throw-away data folder)."""
    from exomap.web.app import create_app
    from exomap.web.settings import Settings

    with tempfile.TemporaryDirectory() as tmp:
        app = create_app(Settings(data_dir=Path(tmp), executor="thread"))
        doc = app.openapi()
        app.state.store.close()
        return doc


def document_text() -> str:
    """The committed form of the document: indented, keys in the framework's order, a final newline."""
    return json.dumps(document(), indent=2, ensure_ascii=False) + "\n"


if __name__ == "__main__":  # python -m exomap.web.apidocs docs/openapi.json  (make openapi)
    if len(sys.argv) != 2:
        sys.exit("usage: python -m exomap.web.apidocs PATH  (writes the OpenAPI document to PATH)")
    Path(sys.argv[1]).write_text(document_text(), encoding="utf-8")
