"""Deciding the next stage on the screen: audition and keep, grow with patience, references, reveal.

Data: scikit-learn's diabetes data written as a CSV (see tui_support).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression
from sklearn.metrics import mean_squared_error
from textual.widgets import TextArea
from tui_support import add_stage, diabetes_csv, settle, setup_app, start_chain

import stages
from tui.screens.audition_form import AuditionForm, parse_candidates
from tui.screens.audition_result import AuditionResultScreen
from tui.screens.grow_form import GrowForm
from tui.screens.workbench import WorkbenchScreen
from tui.widgets.reference_pane import ReferencePane

THREE = """\
[[candidate]]
kind = "tree"
shrinkage = 0.5
params = { max_depth = [2, 3] }

[[candidate]]
kind = "spline"
shrinkage = 0.5
"""


def shown(app) -> set[str]:
    """Return the actions the footer offers now."""
    return {b.binding.action for b in app.active_bindings.values() if b.enabled and b.binding.show}


def enabled(app) -> set[str]:
    """Return the actions a key does now, in the footer or not (reveal is kept out of it)."""
    return {b.binding.action for b in app.active_bindings.values() if b.enabled}


def engine_chain(path, **options) -> stages.Chain:
    """Return the chain the setup screen's defaults build, by the engine alone, with one linear stage."""
    chain = stages.Chain.from_file(path, "progression", stages.Holdout(fraction=0.2, seed=0, **options))
    chain.add("linear")
    return chain


async def audition(pilot, text: str) -> AuditionResultScreen:
    """Open the audition form, write ``text``, run it and return the result screen."""
    await pilot.press("n")
    await pilot.pause()
    form = pilot.app.screen
    assert isinstance(form, AuditionForm)
    form.query_one("#candidates", TextArea).text = text
    await pilot.pause()
    await pilot.press("ctrl+r")
    await settle(pilot)
    assert isinstance(pilot.app.screen, AuditionResultScreen)
    return pilot.app.screen


async def test_audition_three_candidates_and_keep_the_second(tmp_path):
    path = diabetes_csv(tmp_path)
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        workbench = app.screen
        result = await audition(pilot, THREE)
        cards = result.cards
        assert [" · ".join(c.border_title.split(" · ")[:2]) for c in cards] == [
            "1 · tree × 0.5", "2 · tree × 0.5", "3 · spline × 0.5"]
        # reference: the engine's own audition of the same candidates on the same chain
        reference = engine_chain(path)
        candidates = reference.audition(parse_candidates(THREE, "regression")[0])
        assert [c.candidate.valid for c in cards] == [c.valid for c in candidates]
        best = int(np.argmin([c.valid for c in candidates]))
        assert "* best" in cards[best].border_subtitle and "◆ 1-SE pick" in cards[best].border_subtitle
        assert result.focused is cards[best]
        for _ in range((1 - best) % 3):
            await pilot.press("right")
        assert result.focused is cards[1]
        await pilot.press("enter")
        await settle(pilot)
        assert app.screen is workbench
        assert [r.kind for r in workbench.view.rows] == ["start", "linear", "tree"]
        assert workbench.chain.stages[-1].spec.params == {"max_depth": 3}
        reference.keep(candidates[1])
        for ours, theirs in zip(workbench.chain.outputs(), reference.outputs(), strict=True):
            assert np.array_equal(ours, theirs)  # exactly the predictions chain.keep gives
        assert str(workbench.query_one("#result").render()).startswith("kept candidate 2 (tree, max_depth 3)")


async def test_the_audition_form_says_what_is_wrong_and_keeping_none_changes_nothing(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await pilot.press("n")
        await pilot.pause()
        form = app.screen
        form.query_one("#candidates", TextArea).text = '[[candidate]]\nkind = "tree"\nparams = { max_dept = [2, 3] }\n'
        await pilot.pause()
        await pilot.press("ctrl+r")
        await pilot.pause()
        assert app.screen is form
        assert "candidate 1: " in str(form.query_one("#audition-count").render())
        assert "max_dept" in str(form.query_one("#audition-count").render())
        form.query_one("#ready").value = "trees by max_depth (2, 3, 4)"
        await pilot.pause()
        assert str(form.query_one("#audition-count").render()).startswith("3 candidates")
        await pilot.press("ctrl+r")
        await settle(pilot)
        assert len(app.screen.cards) == 3
        await pilot.press("escape")
        await pilot.pause()
        assert isinstance(app.screen, WorkbenchScreen) and app.screen.view.n_stages == 1
        assert "kept no candidate" in str(app.screen.query_one("#result").render())


async def test_grow_with_patience_stops_and_trims_as_the_engine_does(tmp_path):
    path = diabetes_csv(tmp_path)
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await pilot.press("g")
        await pilot.pause()
        form = app.screen
        assert isinstance(form, GrowForm)
        assert form.query_one("#grow-shrinkage").value == "0.1"
        form.query_one("#grow-params").value = "max_depth=2"
        form.query_one("#grow-max").value = "40"
        form.query_one("#grow-patience").value = "3"
        form.query_one("#grow-shrinkage").focus()
        await pilot.press("enter")
        await settle(pilot)
        screen = app.screen
        # reference: the engine's grow of the same stages on the same chain
        reference = engine_chain(path)
        grown = reference.grow("tree", 0.1, params={"max_depth": 2}, max_stages=40, patience=3)
        assert grown.stopped == "patience" and grown.kept < grown.grown
        np.testing.assert_array_equal([r.valid for r in screen.view.rows], reference.table()["valid_rmse"])
        status = str(screen.query_one("#result").render())
        assert status == (f"trimmed to the best, stage {grown.best_row}: kept {grown.kept} of {grown.grown} tree "
                          "stages grown (no better validation for 3 in a row; u undoes)")
        assert "undo" in shown(app)


async def test_cancelling_a_grow_keeps_the_stages_grown_so_far(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        await pilot.press("g")
        await pilot.pause()
        app.screen.query_one("#grow-max").value = "5000"
        app.screen.query_one("#grow-patience").value = "none"
        app.screen.query_one("#grow-shrinkage").focus()
        await pilot.press("enter")
        for _ in range(1000):  # until the table has grown live by a few stages
            await pilot.pause(0.01)
            if screen.view.n_stages >= 4:
                break
        assert app.fitting and screen.view.n_stages >= 4
        assert {"audition", "grow", "add_stage"}.isdisjoint(shown(app)) and "cancel_fit" in shown(app)
        await pilot.press("c")
        await settle(pilot)
        kept = len(screen.chain) - 1
        assert not app.fitting and 3 <= kept < 5000
        assert screen.view.n_stages == len(screen.chain) and screen.chain.stages[-1].kind == "tree"
        assert str(screen.query_one("#result").render()) == f"grow cancelled: kept the {kept} tree stages grown (no trim)"


async def test_references_show_beside_the_best_stage_and_reveal_scores_them_on_test(tmp_path):
    path = diabetes_csv(tmp_path)
    app = setup_app(path)
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.pause()
        app.screen.query_one("#test").value = "0.2"
        await start_chain(pilot)
        await add_stage(pilot, "tree", 0.5)
        screen = app.screen
        assert "reveal_test" in enabled(app) and "reveal_test" not in shown(app)
        assert "locked (r reveals it)" in screen.view.sizes
        await pilot.press("m")
        await settle(pilot)
        pane = screen.query_one(ReferencePane)
        assert pane.display and not screen.query_one("#details").display
        linear = next(r for r in pane.references if r["model"] == "linear alone")
        chain = screen.chain
        frame = pd.read_csv(path)
        features = [c for c in frame.columns if c not in ("patient", "progression")]
        train, valid = chain.split.train, chain.split.valid
        # reference: scikit-learn's least squares on the chain's fitting rows, scored on its validation rows
        model = LinearRegression().fit(frame.iloc[train][features], frame.iloc[train]["progression"])
        rmse = mean_squared_error(frame.iloc[valid]["progression"], model.predict(frame.iloc[valid][features])) ** 0.5
        assert linear["valid_rmse"] == pytest.approx(rmse, rel=1e-9)
        text = str(pane.body.render())
        names = [line.split()[0] for line in text.splitlines()[1:4]]
        assert names == ["chain", "linear", "LightGBM"]  # the pane's short names at this width
        assert "test" not in text.splitlines()[0]  # locked: no test column
        await pilot.press("m")
        assert not pane.display and screen.query_one("#details").display
        await pilot.press("r", "y")
        await settle(pilot)
        assert screen.view.test_revealed and pane.display
        header, *lines = str(pane.body.render()).splitlines()
        assert header.split() == ["train", "valid", "test"]
        assert lines[1].split()[0] == "linear" and len(lines[1].split()) == 4  # its three scores
        assert "decisions made after seeing it bias it" in str(pane.body.render())
        assert chain.describe()["test_reveals"] == 1 and screen.view.reveals == 1
        assert "reveal_test" not in enabled(app)
