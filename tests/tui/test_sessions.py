"""Sessions in the workbench: saved after every action, offered on the next start, never losing the chain.

Data: scikit-learn's diabetes data written as a CSV (see tui_support). REMNANT_HOME points at a
fresh folder for every test (conftest).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from textual.widgets import Button, Label
from tui_support import add_stage, diabetes_csv, settle, setup_app, start_chain

import stages
from stages.files import session
from stages.files.session import SessionSaveError, session_path, session_summary
from tui.screens.failure import FailureScreen
from tui.screens.resume import ResumeScreen
from tui.screens.setup import SetupScreen
from tui.screens.workbench import WorkbenchScreen


def rows(screen: WorkbenchScreen) -> list[tuple[str, float, float]]:
    """Return kind, train and validation metric of every row the table shows."""
    return [(r.kind, r.train, r.valid) for r in screen.view.rows]


async def build_and_quit(path) -> list[tuple[str, float, float]]:
    """Start a chain on ``path``, add linear, tree and k-NN stages, step back once, quit; return the rows."""
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await add_stage(pilot, "tree", 0.5, {"max_depth": "2"})
        await add_stage(pilot, "knn", 0.5)
        await pilot.press("b")
        await settle(pilot)
        shown = rows(app.screen)
        await pilot.press("q")
    return shown


async def test_a_restarted_app_offers_the_session_and_resumes_it_with_undo(tmp_path):
    path = diabetes_csv(tmp_path)
    before = await build_and_quit(path)
    assert session_summary(session_path(path))["stages"] == ["linear", "tree"]
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        offer = app.screen
        assert isinstance(offer, ResumeScreen)
        assert "2 stages: linear, tree · 1 removal to undo" in str(offer.query_one("#resume-summary").render())
        await pilot.press("r")
        await settle(pilot)
        screen = app.screen
        assert isinstance(screen, WorkbenchScreen)
        assert rows(screen) == before  # the same table, restored without a refit
        assert str(screen.query_one("#result").render()).startswith("resumed the session saved")
        await pilot.press("u")
        await settle(pilot)
        assert [r.kind for r in screen.view.rows] == ["start", "linear", "tree", "knn"]
        # reference: the same four stages fit by the engine on its own, with the setup screen's defaults
        chain = stages.Chain.from_file(path, "progression", stages.Holdout(fraction=0.2, seed=0))
        chain.add("linear")
        chain.add("tree", 0.5, params={"max_depth": 2})
        chain.add("knn", 0.5)
        np.testing.assert_array_equal([r.valid for r in screen.view.rows], chain.table()["valid_rmse"])


async def test_changed_data_is_named_and_resuming_refits_on_it(tmp_path):
    path = diabetes_csv(tmp_path)
    await build_and_quit(path)
    frame = pd.read_csv(path)
    frame.iloc[:40].to_csv(path, index=False)  # the file now holds fewer rows
    frame = frame.iloc[:40]
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        offer = app.screen
        assert isinstance(offer, ResumeScreen)
        changes = str(offer.query_one("#resume-changes", Label).render())
        assert "diabetes.csv: " in changes and "bytes smaller" in changes and "content differs" in changes
        assert str(offer.query_one("#resume-yes", Button).label) == "resume: refit 2 stages (r)"
        await pilot.press("r")
        await settle(pilot)
        screen = app.screen
        assert isinstance(screen, WorkbenchScreen)
        assert "refit 2 stages" in str(screen.query_one("#result").render())
        # reference: the session's two stages fit afresh by the engine on the changed file
        chain = stages.Chain(frame, "progression", stages.Holdout(fraction=0.2, seed=0))
        chain.add("linear")
        chain.add("tree", 0.5, params={"max_depth": 2})
        np.testing.assert_allclose([r.valid for r in screen.view.rows], chain.table()["valid_rmse"], rtol=1e-12)
    assert session_summary(session_path(path))["stages"] == ["linear", "tree"]


async def test_starting_fresh_keeps_the_session_until_a_new_chain_starts(tmp_path):
    path = diabetes_csv(tmp_path)
    await build_and_quit(path)
    saved = session_path(path).read_bytes()
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, ResumeScreen)
        await pilot.press("f")
        await pilot.pause()
        assert isinstance(app.screen, SetupScreen)
        assert "replaces the saved session" in str(app.screen.query_one("#setup-state").render())
        assert session_path(path).read_bytes() == saved
        await start_chain(pilot)
        assert isinstance(app.screen, WorkbenchScreen) and app.screen.view.n_stages == 0
    assert session_summary(session_path(path))["stages"] == []


async def test_a_failed_save_says_why_once_and_keeps_the_chain(tmp_path, monkeypatch):
    path = diabetes_csv(tmp_path)

    def full_disk(chain, path=None):
        raise SessionSaveError("cannot write session file 'diabetes.session': No space left on device")

    monkeypatch.setattr(session, "save_session", full_disk)
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        assert isinstance(app.screen, FailureScreen)
        assert app.screen.reason == "cannot write session file 'diabetes.session': No space left on device"
        assert "the chain in memory" in app.screen.note
        await pilot.press("enter")
        await pilot.pause()
        screen = app.screen
        assert isinstance(screen, WorkbenchScreen)
        await add_stage(pilot, "linear")
        # the second failure is a notice, not another modal; the stage is in the chain
        assert app.screen is screen and len(screen.chain) == 1
        assert screen.view.rows[-1].kind == "linear"
        assert any("the session was not saved" in n.message for n in app._notifications)
        await add_stage(pilot, "tree", 0.5)
        assert len(screen.chain) == 2 and not app.fitting
    assert not session_path(path).exists()


async def test_a_recipe_run_saves_its_session_and_offers_it_next_time(tmp_path):
    from test_start import RECIPE

    from tui.app import build_app

    path = diabetes_csv(tmp_path)
    recipe = tmp_path / "diabetes.toml"
    recipe.write_text(RECIPE)
    app = build_app(recipe_path=str(recipe), timings=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        fitted = rows(app.screen)
    assert session_summary(session_path(path))["stages"] == ["linear", "tree", "tree"]
    app = build_app(recipe_path=str(recipe), timings=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, ResumeScreen)
        assert str(app.screen.query_one("#resume-fresh", Button).label) == "fit the recipe afresh (f)"
        await pilot.press("r")
        await settle(pilot)
        assert isinstance(app.screen, WorkbenchScreen) and rows(app.screen) == fitted
