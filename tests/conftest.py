"""Fixtures shared by every test folder: where the demo scenarios are and how to read one."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
SCENARIOS = REPO / "scenarios"


def demo_paths() -> list[Path]:
    """Every demo scenario file in ``scenarios/`` (sorted)."""
    return sorted(SCENARIOS.glob("*.json"))


@pytest.fixture(scope="session")
def scenarios_dir() -> Path:
    return SCENARIOS


@pytest.fixture(scope="session")
def load_demo():
    """``load_demo(name)`` -> the JSON document of ``scenarios/<name>.json`` (a fresh dict each call)."""

    def load(name: str) -> dict:
        return json.loads((SCENARIOS / f"{name}.json").read_text(encoding="utf-8"))

    return load
