"""The numerical core imports only the standard library, numpy and scipy (STYLE.md, DESIGN.md §7)."""

from __future__ import annotations

import json
import subprocess
import sys

FORBIDDEN = ("fastapi", "starlette", "pydantic", "pydantic_core", "jinja2", "pint", "uvicorn", "plotly")

CODE = """
import importlib, json, pkgutil, sys
import exomap.core
names = sorted(m.name for m in pkgutil.iter_modules(exomap.core.__path__, "exomap.core."))
for name in names:
    importlib.import_module(name)
print(json.dumps({"modules": names, "loaded": sorted(sys.modules)}))
"""


def test_core_loads_no_web_or_schema_library():
    out = subprocess.run([sys.executable, "-c", CODE], check=True, capture_output=True, text=True).stdout
    report = json.loads(out)
    # the core's own modules were all imported (the test would pass vacuously otherwise)
    assert {"exomap.core.model", "exomap.core.scenario", "exomap.core.valve"} <= set(report["modules"])
    bad = sorted(m for m in report["loaded"] if m.split(".")[0] in FORBIDDEN)
    assert bad == [], f"the core loaded {bad}"
    assert not any(m.startswith(("exomap.schema", "exomap.web", "exomap.cli")) for m in report["loaded"])


def test_the_check_can_fail():
    # the same probe does see pydantic when the schema layer is imported
    code = CODE.replace("import exomap.core\n", "import exomap.core, exomap.schema\n")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True).stdout
    assert "pydantic" in json.loads(out)["loaded"]
