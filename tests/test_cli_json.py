"""The CLI's ``--json`` output (issue 12, defect 12): compact when stdout is not a terminal, indented at a
terminal, strict JSON either way (non-finite numbers as null), the same document as the API's."""

from __future__ import annotations

import io
import json
import math
import subprocess
import sys

import numpy as np
from exomap.cli import print_json


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_compact_when_piped_and_indented_at_a_terminal(monkeypatch) -> None:
    doc = {"a": [1.5, float("nan"), math.inf], "b": {"c": np.float64(2.0), "d": np.arange(3)}, "e": "ΔT"}
    piped = io.StringIO()
    monkeypatch.setattr(sys, "stdout", piped)
    print_json(doc)
    text = piped.getvalue()
    assert text.count("\n") == 1 and text.endswith("\n")
    # strict JSON: NaN and infinity are null ("no value"), numpy values are plain numbers
    assert json.loads(text) == {"a": [1.5, None, None], "b": {"c": 2.0, "d": [0, 1, 2]}, "e": "ΔT"}
    assert "NaN" not in text and "Infinity" not in text

    terminal = _Terminal()
    monkeypatch.setattr(sys, "stdout", terminal)
    print_json(doc)
    assert terminal.getvalue().count("\n") > 5
    assert json.loads(terminal.getvalue()) == json.loads(text)


def test_map_json_through_a_pipe_is_one_line_equal_to_the_core_document() -> None:
    code = "import sys; from exomap.cli import main; sys.exit(main(sys.argv[1:]))"
    out = subprocess.run(
        [sys.executable, "-c", code, "map", "mild-single-state", "--json"],
        capture_output=True,
        text=True,
        check=True,
        timeout=120,
    ).stdout
    assert out.count("\n") == 1
    doc = json.loads(out)
    from exomap.cli import load_scenario
    from exomap.core.opmap import operating_map

    sc = load_scenario("mild-single-state")
    assert doc["region"] == operating_map(sc).to_dict()["region"]
