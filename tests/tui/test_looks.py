"""What the screens show: no colour under NO_COLOR, binary views, the residual scatter, help, reveal, k-fold spread."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from textual.widgets import Select
from tui_support import add_stage, diabetes_csv, settle, setup_app, start_chain

from tui.app import RemnantApp
from tui.figures import sample_rows
from tui.screens.help import HelpScreen
from tui.screens.workbench import WorkbenchScreen
from tui.widgets.residual_pane import ResidualPane


def cancer_csv(folder):
    """Write five columns of scikit-learn's breast cancer data, target ``malignant`` (1 = malignant)."""
    data = load_breast_cancer(as_frame=True)
    frame = data.frame.iloc[:, :5].copy()
    frame["malignant"] = 1 - data.target  # scikit-learn codes malignant as 0
    path = folder / "cancer.csv"
    frame.to_csv(path, index=False)
    return path


#: the exported picture's own parts: the window buttons, and the terminal's default text colour
#: (Rich's SVG theme), used for text the app leaves uncoloured
FRAME = {"#ff5f57", "#febc2e", "#28c840", "#c5c8c6"}


def colours(svg: str) -> set[str]:
    """Return every fill and text colour the app used in an exported screenshot."""
    found = set(re.findall(r'fill="(#[0-9a-fA-F]{6})"', svg)) | set(re.findall(r"fill: (#[0-9a-fA-F]{6})", svg))
    return {c.lower() for c in found} - FRAME


async def test_no_color_leaves_only_greys(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        assert app.no_color
        used = colours(app.export_screenshot())
        assert used, "the screenshot has colours to check"
        assert all(c[1:3] == c[3:5] == c[5:7] for c in used), sorted(used)
        # the marks that colour would carry are characters too
        table = app.screen.query_one("#chain")
        assert str(table.get_cell("1", "mark")) == "*"


async def test_binary_chain_shows_pseudo_residuals_and_probabilities_by_class(tmp_path):
    path = cancer_csv(tmp_path)
    app = setup_app(path, target="malignant")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        options = {v for _, v in app.screen.query_one("#loss", Select)._options if v != Select.NULL}
        assert options == {"logloss"}
        await start_chain(pilot)
        await add_stage(pilot, "logistic")
        histogram = app.screen.query_one(ResidualPane)
        assert histogram.border_title.startswith("pseudo-residuals y-p")
        residuals = app.screen.view.residuals.residuals("valid", 1)
        assert residuals.min() > -1 and residuals.max() < 1
        await pilot.press("v")
        await pilot.pause()
        assert histogram.mode == "classes"
        chain = app.screen.chain
        # reference: the validation rows' classes counted by pandas from the CSV itself
        classes = pd.read_csv(path)["malignant"].iloc[chain.split.valid].value_counts()
        assert int(histogram.plot.counts["1"].sum()) == classes[1]
        assert int(histogram.plot.counts["0"].sum()) == classes[0]
        for mode in ("feature", "largest", "calibration", "histogram"):  # the binary chain's other views
            await pilot.press("v")
            assert histogram.mode == mode


async def test_residuals_against_fitted_plot_a_bounded_sample(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await pilot.press("v")
        await pilot.pause()
        histogram = app.screen.query_one(ResidualPane)
        assert histogram.mode == "fitted"
        assert len(histogram.plot.figure.x) == app.screen.view.residuals.targets("valid").size
    rows = sample_rows(1_000_000)
    assert len(rows) == 2000 and np.all(np.diff(rows) > 0)
    assert np.array_equal(rows, sample_rows(1_000_000))


async def test_help_lists_every_key_of_the_main_screen(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        listed = {key for _, keys in app.screen.sections for key, _ in keys}
        for binding in WorkbenchScreen.BINDINGS + RemnantApp.BINDINGS:
            first = binding.key.split(",")[0].replace("question_mark", "?").replace("escape", "esc")
            assert any(first in entry for entry in listed), binding.key
        await pilot.press("escape")
        assert isinstance(app.screen, WorkbenchScreen)


async def test_reveal_needs_a_yes_and_adds_the_test_column(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        app.screen.query_one("#test").value = "0.2"
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await pilot.press("r")
        await pilot.pause()
        assert "bias" in app.screen.detail
        await pilot.press("n")
        await pilot.pause()
        assert not app.screen.view.test_revealed
        await pilot.press("r", "y")
        await settle(pilot)
        view = app.screen.view
        assert view.test_revealed and all(r.test is not None for r in view.rows)
        assert "reveal_test" not in {b.binding.action for b in app.active_bindings.values() if b.enabled}
        await add_stage(pilot, "tree", 0.5)
        assert not app.screen.view.test_revealed  # any change locks the test part again


async def test_a_kfold_chain_shows_the_spread_of_its_folds(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        app.screen.query_one("#scheme", Select).value = "kfold"
        await pilot.pause()
        assert app.screen.query_one("#row-folds").display and not app.screen.query_one("#row-fraction").display
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        table = app.screen.query_one("#chain")
        chain = app.screen.chain
        folds = chain.scores()[1].fold_valid
        # reference: the standard error of the per-fold scores, computed here with numpy
        expected = np.std(folds, ddof=1) / np.sqrt(len(folds))
        assert app.screen.view.rows[1].spread == pytest.approx(expected)
        assert "±" in table.border_subtitle and len(folds) == 5
