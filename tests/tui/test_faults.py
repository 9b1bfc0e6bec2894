"""Faults inside a fit, seen on the screen: one line naming the stage and the reason, the chain unchanged.

Injected kinds stand in for a broken learner: one runs out of memory, one predicts NaN, one
predicts infinity, one waits until it is cancelled. Data: scikit-learn's diabetes data.
"""

from __future__ import annotations

import threading
import time
from typing import Any, ClassVar

import numpy as np
import pytest
from tui_support import add_stage, diabetes_csv, settle, setup_app, start_chain

from stages import kinds
from stages.kinds.base import Artifact, FitRequest, StageKind
from tui.screens.failure import FailureScreen
from tui.screens.workbench import WorkbenchScreen


class Constant:
    """A learner that predicts one value everywhere."""

    def __init__(self, value: float) -> None:
        self.value = value

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return ``value`` for every row."""
        return np.full(len(X), self.value)


class FaultyKind(StageKind):
    """A kind whose fit fails as ``fault`` says: memory, nan, inf, or wait (until cancelled)."""

    summary: ClassVar[str] = "fails on purpose (test only)"
    started = threading.Event()

    def __init__(self, fault: str) -> None:
        self.name = fault
        self.fault = fault

    def fit(self, request: FitRequest, params: dict[str, Any]) -> Any:
        """Fail, or return a learner whose predictions are not finite."""
        if self.fault == "memory":
            raise MemoryError()
        if self.fault == "wait":
            self.started.set()
            while True:
                request.check_cancel()
                time.sleep(0.01)
        return Constant(np.nan if self.fault == "nan" else np.inf)

    def save(self, learner: Any) -> Artifact:
        """Never reached."""
        raise NotImplementedError

    def load(self, artifact: Artifact) -> Any:
        """Never reached."""
        raise NotImplementedError


@pytest.fixture
def faulty(monkeypatch):
    """Register the faulty kinds for one test."""
    kinds.kind_names()  # load the built-in kinds first
    for fault in ("memory", "nan", "inf", "wait"):
        monkeypatch.setitem(kinds._REGISTRY, fault, FaultyKind(fault))
    FaultyKind.started.clear()


def state(screen: WorkbenchScreen) -> tuple:
    """Return what the chain is: its stage objects and every track's output after its last stage."""
    chain = screen.chain
    return tuple(chain.stages), tuple(o.copy() for o in chain.outputs())


def same(a: tuple, b: tuple) -> bool:
    """Return True when two ``state`` results are the same stages with bit-identical outputs."""
    return a[0] == b[0] and all(np.array_equal(x, y) for x, y in zip(a[1], b[1], strict=True))


@pytest.mark.parametrize(("fault", "reason"), [
    ("memory", "stage 2 (memory): ran out of memory while fitting"),
    ("nan", "stage 2 (nan): 442 of 442 predictions are not finite (NaN or infinite)"),
    ("inf", "stage 2 (inf): 442 of 442 predictions are not finite (NaN or infinite)"),
])
async def test_a_faulty_learner_is_one_line_naming_the_stage_and_the_chain_stays(tmp_path, faulty, fault, reason):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        before = state(screen)
        await add_stage(pilot, fault)
        assert isinstance(app.screen, FailureScreen)
        assert app.screen.reason == reason  # 442 rows: every row of the diabetes data, on the one track
        assert app.screen.note == "the chain is as it was"
        await pilot.press("enter")
        assert app.screen is screen and same(state(screen), before)
        assert str(screen.query_one("#result").render()) == f"adding {fault} failed: {reason}; the chain is as it was"
        await add_stage(pilot, "tree", 0.5)  # the workbench keeps working
        assert [r.kind for r in screen.view.rows] == ["start", "linear", "tree"]


async def test_a_fault_while_growing_is_one_line_and_grows_nothing(tmp_path, faulty):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        before = state(screen)
        await pilot.press("g")
        await pilot.pause()
        app.screen.query_one("#grow-kind").value = "nan"
        app.screen.query_one("#grow-shrinkage").focus()
        await pilot.press("enter")
        await settle(pilot)
        assert isinstance(app.screen, FailureScreen)
        assert app.screen.reason.startswith("stage 2 (nan): 442 of 442 predictions are not finite")
        await pilot.press("enter")
        assert same(state(screen), before)


async def test_cancelling_mid_fit_names_the_stage_and_leaves_the_chain(tmp_path, faulty):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        before = state(screen)
        await add_stage(pilot, "wait", wait=False)
        for _ in range(500):
            await pilot.pause(0.01)
            if FaultyKind.started.is_set():
                break
        assert app.fitting
        await pilot.press("c")
        await settle(pilot)
        assert not app.fitting and not isinstance(app.screen, FailureScreen)
        assert str(screen.query_one("#result").render()) == (
            "adding wait cancelled during stage 2 (wait); the chain is as it was")
        assert same(state(screen), before)
        await add_stage(pilot, "tree", 0.5)
        assert screen.view.n_stages == 2
