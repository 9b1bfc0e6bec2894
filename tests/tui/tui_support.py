"""Shared data and steps for the workbench's pilot tests.

The data is scikit-learn's diabetes data (442 rows, 10 numeric features, target
``progression``), written as a CSV with an id column added, so the tests read a file
exactly as a user's ``remnant explore`` would.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sklearn.datasets import load_diabetes
from textual.pilot import Pilot
from textual.widgets import Input, Select

from tui.app import build_app
from tui.screens.add_stage import AddStageScreen


def diabetes_csv(folder: Path) -> Path:
    """Write scikit-learn's diabetes data (with a ``patient`` id column) as a CSV and return its path."""
    data = load_diabetes(as_frame=True)
    frame = data.frame.rename(columns={"target": "progression"})
    frame.insert(0, "patient", [f"P{i:04d}" for i in range(len(frame))])
    path = folder / "diabetes.csv"
    frame.to_csv(path, index=False)
    return path


def large_csv(folder: Path, rows: int = 20_000) -> Path:
    """Write a larger made-up regression table (for a fit slow enough to cancel) and return its path."""
    rng = np.random.RandomState(0)
    X = rng.normal(size=(rows, 6))
    y = X @ rng.normal(size=6) + np.sin(3 * X[:, 0]) * 2 + rng.normal(scale=0.5, size=rows)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(6)])
    frame["y"] = y
    path = folder / "large.csv"
    frame.to_csv(path, index=False)
    return path


def setup_app(path: Path, target: str = "progression") -> Any:
    """Return the app on the setup screen of ``path`` with ``target`` preselected (timings hidden)."""
    return build_app(data_path=str(path), target=target, timings=False)


async def settle(pilot: Pilot) -> None:
    """Wait until the fit worker and the panes' questions are done and every message they caused has been handled."""
    for _ in range(200):  # a generous bound that only catches a hang
        await pilot.pause()
        await pilot.app.workers.wait_for_complete()
        for _ in range(3):
            await pilot.pause()
        if not pilot.app.fitting and not pilot.app.answering:
            return


async def start_chain(pilot: Pilot) -> None:
    """Wait for the setup screen to read the columns, press start and wait for the workbench."""
    await settle(pilot)
    await pilot.press("s")
    await settle(pilot)


async def add_stage(pilot: Pilot, kind: str, shrinkage: float = 1.0, params: dict[str, str] | None = None,
                    more: str = "", repeat: int = 1, wait: bool = True) -> None:
    """Open the add-stage form with ``a``, fill it in, and press enter in the shrinkage field."""
    await pilot.press("a")
    await pilot.pause()
    form = pilot.app.screen
    assert isinstance(form, AddStageScreen)
    form.query_one("#kind", Select).value = kind
    await pilot.pause()
    form.query_one("#shrinkage", Input).value = str(shrinkage)
    form.query_one("#repeat", Input).value = str(repeat)
    for name, text in (params or {}).items():
        field = next(f for f in form.query(".param").results(Input) if f.name == name)
        field.value = text
    form.query_one("#more", Input).value = more
    form.query_one("#shrinkage", Input).focus()
    await pilot.press("enter")
    if wait:
        await settle(pilot)
