"""The workbench story on small data: setup, three stages, step back, drop, trim, undo, save, reopen.

Data: scikit-learn's diabetes data written as a CSV (see tui_support).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression
from textual.widgets import Select
from tui_support import add_stage, diabetes_csv, settle, setup_app, start_chain

import stages
from tui.screens.confirm import ConfirmScreen
from tui.screens.inspect import InspectScreen
from tui.screens.save import PathPrompt
from tui.screens.setup import SetupScreen
from tui.screens.workbench import WorkbenchScreen
from tui.widgets.chain_table import ChainTable
from tui.widgets.column_roles import ColumnRoles
from tui.widgets.residual_pane import ResidualPane


def kinds(screen: WorkbenchScreen) -> list[str]:
    """Return the kinds shown in the chain table, row 0 first."""
    return [row.kind for row in screen.query_one(ChainTable).view.rows]


def bindings_shown(app) -> set[str]:
    """Return the actions the footer offers now."""
    return {b.binding.action for b in app.active_bindings.values() if b.enabled and b.binding.show}


async def three_stages(pilot) -> WorkbenchScreen:
    """Start a chain on the setup screen and add a linear, a tree and a LightGBM stage."""
    await start_chain(pilot)
    await add_stage(pilot, "linear")
    await add_stage(pilot, "tree", 0.5, {"max_depth": "2"})
    await add_stage(pilot, "lightgbm", 0.5, {"n_estimators": "20", "num_leaves": "7"})
    return pilot.app.screen


async def test_setup_screen_shows_roles_and_preselects_the_target(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        screen = app.screen
        assert isinstance(screen, SetupScreen)
        assert screen.query_one("#target", Select).value == "progression"
        assert screen.chain_task == "regression"
        roles = screen.query_one(ColumnRoles)
        uses = {r.name: str(roles.get_cell(r.name, "use")) for r in roles.reports}
        assert uses["patient"] == "id"  # every value unique: it names the rows, it is no feature
        assert uses["progression"] == "target" and uses["bmi"] == "numeric"
        # only the losses of a regression are offered (those for counts and amounts among them)
        assert {v for _, v in screen.query_one("#loss", Select)._options if v != Select.NULL} == {
            "squared", "absolute", "huber", "poisson", "gamma", "tweedie"}
        await pilot.press("down", "down", "x")  # exclude "sex"
        assert screen.excluded == {"sex"}
        await start_chain(pilot)
        assert isinstance(app.screen, WorkbenchScreen)
        assert "sex" not in app.screen.view.features and len(app.screen.view.features) == 9


async def test_a_bad_choice_on_the_setup_screen_is_one_line_in_a_modal(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        app.screen.query_one("#fraction").value = "1.5"
        await start_chain(pilot)
        assert type(app.screen).__name__ == "FailureScreen"
        assert "fraction must be in (0, 1)" in app.screen.reason
        await pilot.press("enter")
        assert isinstance(app.screen, SetupScreen)


async def test_three_stages_change_the_table_and_the_histogram(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        histogram = app.screen.query_one(ResidualPane)
        seen = [histogram.plot.counts["valid"].copy()]
        for kind, shrinkage, params in [("linear", 1.0, {}), ("tree", 0.5, {"max_depth": "2"}),
                                        ("lightgbm", 0.5, {"n_estimators": "20", "num_leaves": "7"})]:
            await add_stage(pilot, kind, shrinkage, params)
            assert kinds(app.screen)[-1] == kind
            assert histogram.row == len(kinds(app.screen)) - 1  # the new stage is selected
            seen.append(histogram.plot.counts["valid"].copy())
            assert not np.array_equal(seen[-1], seen[-2])
        assert kinds(app.screen) == ["start", "linear", "tree", "lightgbm"]
        assert app.screen.query_one(ChainTable).row_count == 4


async def test_linear_stage_residuals_match_scikit_learn(tmp_path):
    path = diabetes_csv(tmp_path)
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        chain = app.screen.chain
        frame = pd.read_csv(path)
        features = [c for c in frame.columns if c not in ("patient", "progression")]
        train, valid = chain.split.train, chain.split.valid
        # reference: scikit-learn's least squares on the same fitting rows
        model = LinearRegression().fit(frame.iloc[train][features], frame.iloc[train]["progression"])
        expected = frame.iloc[valid]["progression"].to_numpy() - model.predict(frame.iloc[valid][features])
        source = app.screen.view.residuals
        np.testing.assert_allclose(source.residuals("valid", 1), expected, rtol=1e-7, atol=1e-7)
        histogram = app.screen.query_one(ResidualPane)
        shown = np.clip(source.residuals("valid", 1), histogram.plot.edges[0], histogram.plot.edges[-1])
        # reference: numpy's histogram over the widget's own edges
        np.testing.assert_array_equal(histogram.plot.counts["valid"], np.histogram(shown, histogram.plot.edges)[0])


async def test_step_back_drop_trim_and_undo(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await three_stages(pilot)
        before = [r.valid for r in screen.view.rows]
        assert "undo" not in bindings_shown(app)
        await pilot.press("b")
        await settle(pilot)
        assert kinds(screen) == ["start", "linear", "tree"]
        assert "undo" in bindings_shown(app)
        await pilot.press("u")
        await settle(pilot)
        assert [r.valid for r in screen.view.rows] == before
        # drop the linear stage: the stages after it are refit on the new residuals
        await pilot.press("home", "down")
        await pilot.press("d")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)
        await pilot.press("y")
        await settle(pilot)
        assert kinds(screen) == ["start", "tree", "lightgbm"]
        assert screen.view.rows[1].valid != before[2]
        await pilot.press("u")
        await settle(pilot)
        assert kinds(screen) == ["start", "linear", "tree", "lightgbm"]
        assert [r.valid for r in screen.view.rows] == before
        # a one-neighbour stage fits noise, so the best stage comes before the last
        await add_stage(pilot, "knn", 1.0, {"n_neighbors": "1"})
        best = screen.view.best
        assert best < screen.view.n_stages and "trim" in bindings_shown(app)
        await pilot.press("t")
        await settle(pilot)
        assert screen.view.n_stages == best and "trim" not in bindings_shown(app)


async def test_save_export_and_reopen_read_only(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # files are offered in the current folder, as an absolute path
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await three_stages(pilot)
        await pilot.press("s")
        await pilot.pause()
        assert isinstance(app.screen, PathPrompt)
        assert app.screen.default == tmp_path / "diabetes.chain"
        await pilot.press("enter")
        await settle(pilot)
        fitted = stages.load(tmp_path / "diabetes.chain")
        assert [s.kind for s in fitted.stages] == ["linear", "tree", "lightgbm"]
        await pilot.press("e", "enter")
        await settle(pilot)
        recipe = stages.read_recipe(tmp_path / "diabetes.toml")
        assert [s.kind for s in recipe.specs()] == ["linear", "tree", "lightgbm"]
        live = [r.valid for r in screen.view.rows]
        await pilot.press("o", "enter")
        await settle(pilot)
        assert isinstance(app.screen, InspectScreen)
        stored = [r.valid for r in app.screen.view.rows]
        np.testing.assert_allclose(stored, live, rtol=1e-12)
        assert app.screen.query_one(ChainTable).row_count == 4
        await pilot.press("escape")
        assert app.screen is screen


async def test_saving_over_a_file_asks_first(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    app = setup_app(diabetes_csv(tmp_path))
    (tmp_path / "diabetes.chain").write_text("keep me")
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("s", "enter")
        await pilot.pause()
        assert isinstance(app.screen, PathPrompt)  # still asking
        assert (tmp_path / "diabetes.chain").read_text() == "keep me"
        await pilot.press("enter")
        await settle(pilot)
        assert len(stages.load(tmp_path / "diabetes.chain").stages) == 0


@pytest.mark.parametrize("size", [(60, 20), (200, 60)])
async def test_the_workbench_survives_other_window_sizes(tmp_path, size):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await three_stages(pilot)
        await pilot.resize_terminal(*size)
        await pilot.pause()
        await pilot.press("up", "v", "down")
        await pilot.pause()
        assert app.screen.query_one(ChainTable).selected == 3
        await pilot.resize_terminal(80, 24)
        await pilot.pause()
