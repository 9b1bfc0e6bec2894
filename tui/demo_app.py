"""The ready-made demo app: the workbench fitting the demo recipe (refrigerated deliveries).

The tests, the README screenshot script and the quick start all use ``demo_app()``.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import tui

if TYPE_CHECKING:
    from .app import RemnantApp


def demo_folder() -> Path:
    """Return the folder holding the demo data and its recipes: ``tui/demo``, package data that
    ships in the wheel, so ``remnant demo`` works wherever remnant is installed."""
    return Path(tui.__file__).resolve().parent / "demo"


def demo_app(*, timings: bool = True, binary: bool = False, multiclass: bool = False,
             sessions: bool = False) -> RemnantApp:
    """Return the app on the demo recipe (``binary`` for the spoilage recipe, ``multiclass`` for the
    delay causes); it starts fitting when run.

    It saves no session unless asked (``sessions``), so a screenshot never replaces the
    user's own session of the demo data; ``remnant demo`` saves one.
    """
    from .app import build_app

    recipe = "delay_causes.toml" if multiclass else "deliveries_binary.toml" if binary else "deliveries.toml"
    return build_app(recipe_path=str(demo_folder() / recipe), timings=timings, sessions=sessions)
