"""Fits in the worker: a fit can be cancelled, a failing fit is one line in a modal, and the chain stays as it was."""

from __future__ import annotations

from typing import Any, ClassVar

import pytest
from textual.widgets import Input, Select
from tui_support import add_stage, diabetes_csv, large_csv, settle, setup_app, start_chain

from stages import kinds
from stages.kinds.base import Artifact, FitRequest, StageKind
from tui.messages import FitProgressed, FitStarted
from tui.screens.add_stage import AddStageScreen
from tui.screens.failure import FailureScreen
from tui.screens.workbench import WorkbenchScreen
from tui.widgets.fit_progress import FitProgress
from tui.widgets.residual_pane import ResidualPane


class ExplodingKind(StageKind):
    """A kind whose fit always raises, as a broken learner would."""

    name: ClassVar[str] = "exploding"
    summary: ClassVar[str] = "raises while fitting (test only)"

    def fit(self, request: FitRequest, params: dict[str, Any]) -> Any:
        """Raise, with a message spread over two lines."""
        raise RuntimeError("the learner fell over\nsecond line that must not show")

    def save(self, learner: Any) -> Artifact:
        """Never reached."""
        raise NotImplementedError

    def load(self, artifact: Artifact) -> Any:
        """Never reached."""
        raise NotImplementedError


@pytest.fixture
def exploding_kind(monkeypatch):
    """Register the exploding kind for one test."""
    kinds.kind_names()  # load the built-in kinds first
    monkeypatch.setitem(kinds._REGISTRY, "exploding", ExplodingKind())
    return "exploding"


def snapshot(screen: WorkbenchScreen) -> list[tuple[str, float, float]]:
    """Return kind, train and validation score per row of the live chain."""
    table = screen.chain.table()
    return list(zip(table["kind"], table.iloc[:, 4], table.iloc[:, 5], strict=True))


async def test_cancelling_a_long_fit_leaves_the_chain_unchanged(tmp_path):
    app = setup_app(large_csv(tmp_path), target="y")
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        before = snapshot(screen)
        await add_stage(pilot, "lightgbm", 0.5, {"n_estimators": "100000"}, wait=False)
        progress = screen.query_one(FitProgress)
        for _ in range(500):  # until the boosting rounds have begun
            await pilot.pause(0.02)
            if "round" in progress.detail:
                break
        assert app.fitting and progress.display
        shown = {b.binding.action for b in app.active_bindings.values() if b.binding.show}
        assert "cancel_fit" in shown and "add_stage" not in shown and "step_back" not in shown
        # the panes read a snapshot, so moving through the chain never waits for the fit
        histogram = screen.query_one(ResidualPane)
        await pilot.press("up")
        await pilot.pause()
        assert app.fitting and histogram.row == 0
        await pilot.press("c")
        await settle(pilot)
        assert not app.fitting and not progress.display
        assert snapshot(screen) == before
        assert "cancelled" in str(screen.query_one("#result").render())
        assert not isinstance(app.screen, FailureScreen)


async def test_an_unknown_param_is_one_line_in_a_modal(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        before = snapshot(screen)
        await add_stage(pilot, "tree", 0.5, more="max_depht=3")
        assert isinstance(app.screen, FailureScreen)
        assert "has no parameter 'max_depht'" in app.screen.reason
        assert "\n" not in app.screen.reason
        await pilot.press("enter")
        assert app.screen is screen and snapshot(screen) == before


async def test_a_learner_that_raises_is_one_line_in_a_modal(tmp_path, exploding_kind):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        before = snapshot(screen)
        await add_stage(pilot, exploding_kind)
        assert isinstance(app.screen, FailureScreen)
        assert app.screen.reason == "stage 2 (exploding): RuntimeError: the learner fell over"
        await pilot.press("escape")
        assert snapshot(screen) == before and screen.view.n_stages == 1
        # the workbench keeps working after the failure
        await add_stage(pilot, "tree", 0.5)
        assert screen.view.n_stages == 2


async def test_the_form_says_what_is_wrong_before_any_fit(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear", shrinkage=1.5, wait=False)
        await pilot.pause()
        form = app.screen
        assert isinstance(form, AddStageScreen)
        assert "shrinkage must be in (0, 1], not 1.5" in str(form.query_one("#add-error").render())
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen.view.n_stages == 0 and not app.fitting


async def test_the_form_works_by_keyboard_alone(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("a")
        await pilot.pause()
        form = app.screen
        kinds = form.query_one("#kind", Select)
        assert form.focused is kinds
        await pilot.press("down", "down", "enter")  # open the kind list, take the next kind
        await pilot.pause()
        await pilot.pause()
        assert kinds.value == "ridge"  # the kind after linear
        assert form.focused is not kinds  # picking a kind moves on, so the next enter fits
        assert [i.name for i in form.query(".param").results(Input)] == ["alpha"]
        await pilot.press("enter")
        await settle(pilot)
        assert [r.kind for r in app.screen.view.rows] == ["start", "ridge"]


async def test_enter_on_the_closed_kind_list_fits_instead_of_opening_it(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, AddStageScreen) and app.screen.focused.id == "kind"
        await pilot.press("enter")
        await settle(pilot)
        assert [r.kind for r in app.screen.view.rows] == ["start", "linear"]


def test_a_newer_progress_report_replaces_one_still_waiting():
    older, newer = FitProgressed(0.1, "round 10/100"), FitProgressed(0.2, "round 20/100")
    assert older.can_replace(newer)
    assert not older.can_replace(FitStarted("adding tree", True))


async def test_a_fit_that_ends_behind_a_modal_still_shows(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        screen = app.screen
        await add_stage(pilot, "forest", 0.5, {"n_estimators": "60"}, wait=False)
        await pilot.press("question_mark")
        await settle(pilot)
        assert type(app.screen).__name__ == "HelpScreen"
        assert screen.view.n_stages == 1 and screen.view.rows[1].kind == "forest"
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen is screen and str(screen.query_one("#result").render()).startswith("added forest")
