"""Helpers of the browser tests (a module of its own so test files import it by a unique name)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
SCREENSHOTS = ROOT / "artifacts" / "screenshots"


def open_page(ctx: Any) -> Any:
    """A new page of ``ctx`` watched by its guard."""
    return ctx.guard.watch(ctx.new_page())


def screenshot(page: Any, name: str, full_page: bool = False) -> Path:
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    path = SCREENSHOTS / f"{name}.png"
    page.screenshot(path=str(path), full_page=full_page)
    return path
