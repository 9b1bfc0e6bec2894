"""The frictions of daily use, each with the check that would have caught it: progress and cancel,
quitting from every screen, keys that work from any field, the add-stage form's enter, the binary
kinds, one number style, long names, small terminals, read-only files, keys that say why not,
an audition where every candidate is worse, labels, save paths, ids and date features, work off
the event loop, and the error curve's zoom.

Data: scikit-learn's diabetes and breast cancer data written as CSV files (see tui_support).
"""

from __future__ import annotations

import re
import threading
import time

import numpy as np
import pandas as pd
import pytest
from textual.widgets import Input, Select
from tui_support import add_stage, diabetes_csv, large_csv, settle, setup_app, start_chain

import stages
from tui import figures
from tui.app import build_app
from tui.screens import setup as setup_screen
from tui.screens.add_stage import AddStageScreen
from tui.screens.audition_result import AuditionResultScreen
from tui.screens.confirm import ConfirmScreen
from tui.screens.date_parts import DatePartsScreen
from tui.screens.failure import FailureScreen
from tui.screens.help import HelpScreen
from tui.screens.inspect import InspectScreen
from tui.screens.resume import ResumeScreen
from tui.screens.save import default_path
from tui.screens.workbench import WorkbenchScreen
from tui.widgets.chain_table import ChainTable
from tui.widgets.error_curve import ErrorCurve
from tui.widgets.fit_progress import STALE, FitProgress
from tui.widgets.residual_pane import ResidualPane


def result(screen) -> str:
    return str(screen.query_one("#result").render())


def cancer_csv(folder):
    """Write five columns of scikit-learn's breast cancer data, target ``malignant`` (1 = malignant)."""
    from sklearn.datasets import load_breast_cancer

    data = load_breast_cancer(as_frame=True)
    frame = data.frame.iloc[:, :5].copy()
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    frame["malignant"] = 1 - data.target
    path = folder / "cancer.csv"
    frame.to_csv(path, index=False)
    return path


# ----- 1: progress and cancel ----------------------------------------------------------------
async def test_a_forest_moves_the_bar_and_a_cancel_stops_it_between_batches(tmp_path):
    app = setup_app(large_csv(tmp_path), target="y")
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        screen = app.screen
        await add_stage(pilot, "forest", 0.5, {"n_estimators": "3000"}, wait=False)
        progress = screen.query_one(FitProgress)
        deadline = time.monotonic() + 180  # until the first batches of trees are in (a bound that only catches a
        while time.monotonic() < deadline:  # hang: on a machine shared with other work the first batch can be slow)
            await pilot.pause(0.02)
            if 0 < progress.fraction < 1:
                break
        assert 0 < progress.fraction < 1 and "trees" in progress.detail
        await pilot.press("c")
        await settle(pilot)
        assert not app.fitting and screen.view.n_stages == 0
        assert "cancelled" in result(screen)


async def test_a_learner_that_reports_nothing_gets_a_sweeping_bar_not_a_frozen_zero(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        progress = app.screen.query_one(FitProgress)
        now = [100.0]
        progress.clock = lambda: now[0]
        progress.begin("adding knn", True)
        progress.advance(0.0, "full chain: fitting")
        assert not progress.sweeping
        now[0] += STALE + 0.1  # no report for longer than STALE: the bar sweeps, the clock still counts
        progress._tick()
        assert progress.sweeping
        progress.advance(0.5, "stage 2 of 4")
        assert not progress.sweeping and progress.bar.progress == 0.5
        progress.end()


# ----- 2: quit from every screen -----------------------------------------------------------------
async def test_q_and_ctrl_q_quit_from_the_saved_session_offer(tmp_path):
    path = diabetes_csv(tmp_path)
    app = setup_app(path)
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
    for key in ("q", "ctrl+q"):
        app = setup_app(path)
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            assert isinstance(app.screen, ResumeScreen)
            await pilot.press(key)
            await pilot.pause()
        assert app.return_code == 0 and not app.is_running


@pytest.mark.parametrize("opened", ["question_mark", "a"])
async def test_q_quits_from_a_dialog_and_ctrl_q_even_from_a_text_field(tmp_path, opened):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press(opened)
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen if opened == "question_mark" else AddStageScreen)
        if opened == "a":
            app.screen.query_one("#more", Input).focus()
            await pilot.press("q")  # a text field takes the letter
            await pilot.pause()
            assert app.is_running and app.screen.query_one("#more", Input).value == "q"
            await pilot.press("ctrl+q")
        else:
            await pilot.press("q")
        await pilot.pause()
    assert not app.is_running


# ----- 3: start from any field ----------------------------------------------------------------------
async def test_ctrl_s_starts_from_a_text_field_and_start_says_why_it_cannot_yet(tmp_path):
    app = setup_app(diabetes_csv(tmp_path), target=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        screen = app.screen
        await pilot.press("ctrl+s")
        await pilot.pause()
        assert "pick the target" in str(screen.query_one("#setup-state").render())
        screen.query_one("#target", Select).value = "progression"
        await settle(pilot)
        field = screen.query_one("#test", Input)
        field.focus()
        field.value = "0.1"
        await pilot.press("s")  # a key for the field (a number field refuses it), not a start
        await pilot.pause()
        assert field.value == "0.1" and app.screen is screen
        await pilot.press("ctrl+s")
        await settle(pilot)
        assert isinstance(app.screen, WorkbenchScreen) and app.screen.view.has_test
        shown = {b.binding.key for b in app.screen.active_bindings.values() if b.binding.show}
        assert "a" in shown


async def test_the_footer_offers_ctrl_s_on_the_setup_screen(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        shown = {b.binding.key: b.binding.action for b in app.screen.active_bindings.values() if b.binding.show}
        assert shown.get("ctrl+s") == "start"


# ----- 5: the binary chain's kinds ----------------------------------------------------------------
async def test_a_binary_chain_offers_logistic_first_and_names_kinds_for_the_log_odds(tmp_path):
    app = setup_app(cancer_csv(tmp_path), target="malignant")
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("a")
        await pilot.pause()
        kinds = app.screen.query_one("#kind", Select)
        assert kinds.value == "logistic"
        labels = [str(label) for label, _ in kinds._options]
        assert labels[0].startswith("logistic — logistic regression on the log-odds")
        assert any(label.startswith("tree — one tree, Newton leaves on the log-odds") for label in labels)
        await pilot.press("enter")
        await settle(pilot)
        assert [r.kind for r in app.screen.view.rows] == ["start", "logistic"]


# ----- 6: one number style ---------------------------------------------------------------------------
def plot_text(plot) -> str:
    """Return the text a plot draws (its axis labels among it)."""
    return plot.render().plain if hasattr(plot.render(), "plain") else str(plot.render())


def decimals(text: str) -> int:
    return len(text.split(".")[1]) if "." in text else 0


async def test_every_number_column_and_axis_is_written_in_one_style_without_float_noise(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        for kind in ("linear", "tree", "knn"):
            await add_stage(pilot, kind, 0.5)
        table = app.screen.query_one(ChainTable)
        for key in ("train", "valid", "change"):
            texts = [str(table.get_cell(str(r), key)).strip() for r in range(4)]
            texts = [t for t in texts if t]
            assert len({decimals(t) for t in texts}) == 1, texts
        for plot in (app.screen.query_one(ErrorCurve), app.screen.query_one("#residual-plot")):
            drawn = plot_text(plot)
            assert re.search(r"\d", drawn) and not re.search(r"\d\.\d{5,}", drawn), drawn  # no float noise
        assert re.search(r"valid rmse \d+\.\d+ → \d+\.\d+", result(app.screen))
        before, after = re.search(r"(\d+\.\d+) → (\d+\.\d+)", result(app.screen)).groups()
        assert decimals(before) == decimals(after)


# ----- 7 and 8: long names, small terminals --------------------------------------------------------
async def test_long_names_end_in_an_ellipsis_and_show_whole_in_the_details(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "sklearn:", 1.0, wait=False)
        await pilot.pause()
        app.screen.query_one("#estimator", Input).value = "sklearn.linear_model.HuberRegressor"
        app.screen.query_one("#shrinkage", Input).focus()
        await pilot.press("enter")
        await settle(pilot)
        table = app.screen.query_one(ChainTable)
        assert str(table.get_cell("1", "kind")).strip() == "HuberRegres…"
        assert "sklearn:sklearn.linear_model.HuberRegressor" in str(app.screen.query_one("#details-body").render())
        await pilot.press("a")
        await pilot.pause()
        app.screen.query_one("#kind", Select).value = "forest"
        await pilot.pause()
        labels = [str(label.render()) for label in app.screen.query(".field > .name")]
        assert "min_samples_leaf" in labels  # the whole parameter name, not min_samples_le


async def test_a_failure_reason_wraps_whole_in_its_modal(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "sklearn:", wait=False)
        await pilot.pause()
        app.screen.query_one("#estimator", Input).value = "sklearn.linear_model.Foo"
        app.screen.query_one("#shrinkage", Input).focus()
        await pilot.press("enter")
        await settle(pilot)
        assert isinstance(app.screen, FailureScreen)
        label = app.screen.query_one("#failure-reason")
        lines = [line.rstrip() for line in str(label.render()).splitlines()]
        assert " ".join(lines).split() == app.screen.reason.split()


async def test_at_80x24_the_table_keeps_its_key_columns_and_p_cycles_the_other_panes(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await add_stage(pilot, "tree", 0.3, repeat=11)
        screen = app.screen
        table = screen.query_one(ChainTable)
        assert {"index", "mark", "kind", "train", "valid", "change"} <= set(table.shown)
        assert table.size.height - 1 >= 10 and table.row_count == 13  # at least 10 stage rows in view
        assert screen.small and [p.display for p in screen.query(".pane") if p.id != "chain"][:3] == [
            False, True, False]
        for side in ("details", "curve", "residuals"):
            await pilot.press("p")
            await pilot.pause()
            assert screen.side == side and screen.query_one(f"#{side}").display
        await pilot.resize_terminal(120, 40)
        await pilot.pause()
        assert not screen.small and all(screen.query_one(f"#{n}").display for n in ("curve", "residuals", "details"))


# ----- 9: a read-only file shows what it holds ----------------------------------------------------
async def test_a_chain_file_whose_test_part_was_revealed_shows_the_test_column(tmp_path):
    chain = stages.Chain.from_file(diabetes_csv(tmp_path), "progression", stages.Holdout(seed=0, test_fraction=0.2))
    chain.add("linear")
    chain.reveal_test()
    chain.save(tmp_path / "revealed.chain")
    app = build_app(chain_path=str(tmp_path / "revealed.chain"), timings=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, InspectScreen)
        table = app.screen.query_one(ChainTable)
        assert "test" in table.shown
        # reference: the test scores the engine stored, as `remnant show` prints them
        expected = chain.table()["test_rmse"].to_numpy()
        np.testing.assert_allclose([r.test for r in app.screen.view.rows], expected, rtol=1e-12)


async def test_a_chain_file_shows_a_linear_stage_s_coefficients_without_standard_errors(tmp_path):
    chain = stages.Chain.from_file(diabetes_csv(tmp_path), "progression", stages.Holdout(seed=0))
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    chain.save(tmp_path / "two.chain")
    app = build_app(chain_path=str(tmp_path / "two.chain"), timings=False)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, InspectScreen)
        await pilot.press("up")  # from the tree stage to the linear stage
        await pilot.pause()
        learned = str(app.screen.query_one("#learned-body").render())
        assert "coefficients" in learned
        # reference: the loaded chain's own table (the engine's coefficients), bmi the strongest term
        table = stages.load(tmp_path / "two.chain").coefficients(1)
        assert table["std_error"].isna().all()
        strongest = table.loc[table["coefficient"].abs().idxmax(), "term"]
        assert strongest in learned
        await pilot.press("down")  # a tree stage has no coefficients to show
        await pilot.pause()
        assert "coefficients" not in str(app.screen.query_one("#learned-body").render())


# ----- 10: one word for the training part ---------------------------------------------------------
async def test_the_training_part_is_called_train_everywhere_and_the_time_column_secs(tmp_path):
    app = build_app(data_path=str(diabetes_csv(tmp_path)), target="progression")
    async with app.run_test(size=(160, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        assert "354 train · 88 valid" in screen.query_one("#title").tooltip
        table = screen.query_one(ChainTable)
        assert "seconds" in table.shown and str(table.columns["seconds"].label).strip() == "secs"
        assert " fit " not in str(screen.query_one("#title").render())
        assert "secs" in str(screen.query_one("#details-body").render())


# ----- 11: keys that cannot act say why -------------------------------------------------------------
async def test_keys_that_cannot_act_say_why_in_the_status_line(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        screen = app.screen
        await pilot.press("u")
        assert "nothing to undo" in result(screen)
        await pilot.press("r")
        assert "no locked test part" in result(screen)
        await pilot.press("b")
        assert "no stages yet" in result(screen)
        await add_stage(pilot, "linear")
        await pilot.press("t")
        assert "nothing to trim" in result(screen)
        await pilot.press("home", "d")
        await pilot.pause()
        assert "start value, which cannot be dropped" in result(screen)
        assert not isinstance(app.screen, ConfirmScreen)
        help_keys = {key for _, keys in app.help_sections() for key, _ in keys}
        assert all("why" not in key for key in help_keys)


# ----- 12: an audition where every candidate is worse ---------------------------------------------
async def test_when_no_candidate_improves_focus_is_on_keep_none_and_keeping_one_asks_first(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await pilot.press("n")
        await pilot.pause()
        # one-neighbour and deep trees at full shrinkage fit noise: on the diabetes data every one is worse
        app.screen.query_one("#candidates").text = (
            '[[candidate]]\nkind = "knn"\nparams = { n_neighbors = [1, 2] }\n'
            '[[candidate]]\nkind = "tree"\nparams = { max_depth = [8] }\n')
        await pilot.press("ctrl+r")
        await settle(pilot)
        screen = app.screen
        assert isinstance(screen, AuditionResultScreen)
        assert all(c.delta > 0 for c in screen.candidates)
        assert screen.focused.id == "keep-none"
        assert "none of the 3 candidates improves validation" in str(screen.query_one("#audition-warning").render())
        assert "◆ = *" not in str(screen.query_one("#audition-note").render())
        await pilot.press("right", "enter")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen) and "makes validation worse" in app.screen.question
        await pilot.press("n")
        await pilot.pause()
        assert app.screen is screen
        await pilot.press("escape")
        await settle(pilot)
        assert app.screen.view.n_stages == 1


# ----- 13: labels --------------------------------------------------------------------------------------
async def test_importance_says_what_it_measures_and_help_explains_the_marks(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        expected = {"tree": "impurity", "lightgbm": "gain", "knn": "permutation", "linear": "|coefficient| standardised"}
        for kind in expected:
            await add_stage(pilot, kind, 0.5)
            assert f"importance ({expected[kind]})" in str(app.screen.query_one("#details-body").render())
        await pilot.press("question_mark")
        await pilot.pause()
        legend = {key for _, keys in app.screen.sections for key, _ in keys}
        shown = str(app.screen.query_one("#help Static").render())
        assert "±" in shown and "importance (permutation)" in shown and "what the marks and labels mean" in shown
        assert "ctrl+s" in legend and "p" in legend and "z" in legend and "w" in legend


# ----- 15: save paths ------------------------------------------------------------------------------------
def test_the_default_save_path_is_the_current_folder_and_never_inside_the_installation(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    path = default_path("diabetes.csv", ".chain")
    assert path.is_absolute() and path == tmp_path.resolve() / "diabetes.chain"
    from tui.demo_app import demo_folder

    monkeypatch.chdir(demo_folder())
    monkeypatch.setenv("HOME", str(tmp_path))
    assert default_path("deliveries.csv", ".toml") == tmp_path.resolve() / "deliveries.toml"


# ----- 16 and 17: ids and date features ----------------------------------------------------------------
async def test_the_id_column_names_the_rows_of_the_largest_residuals(tmp_path):
    path = diabetes_csv(tmp_path)
    app = setup_app(path)
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        screen = app.screen
        pane = screen.query_one(ResidualPane)
        while pane.mode != "largest":
            await pilot.press("v")
        await settle(pilot)
        lines = str(pane.rows_text.render()).splitlines()
        assert lines[0].split()[:4] == ["patient", "actual", "fitted", "residual"]
        # reference: the largest absolute residuals of the validation rows, found with pandas
        frame = pd.read_csv(path)
        residual = screen.view.residuals.residuals("valid", 1)
        order = np.argsort(-np.abs(residual), kind="stable")[:3]
        expected = frame["patient"].iloc[screen.chain.split.valid[order]].tolist()
        assert [line.split()[0] for line in lines[1:4]] == expected


async def test_date_features_are_picked_on_the_setup_screen(tmp_path):
    frame = pd.read_csv(diabetes_csv(tmp_path))
    frame["visit"] = pd.date_range("2024-01-01", periods=len(frame), freq="D").strftime("%Y-%m-%d")
    path = tmp_path / "visits.csv"
    frame.to_csv(path, index=False)
    app = setup_app(path)
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot)
        screen = app.screen
        roles = screen.query_one("#columns")
        roles.move_cursor(row=[r.name for r in roles.reports].index("visit"))
        await pilot.press("f")
        await pilot.pause()
        assert isinstance(app.screen, DatePartsScreen)
        await pilot.press("down", "space", "down", "space", "enter")  # month, day of week
        await pilot.pause()
        assert screen.dates == {"visit": ("month", "day_of_week")}
        await pilot.press("ctrl+s")
        await settle(pilot)
        assert app.screen.chain.schema.dates() == {"visit": ("month", "day_of_week")}
        assert app.screen.view.features[-2:] == ("visit_month", "visit_day_of_week")


# ----- 18: nothing heavy on the event loop -----------------------------------------------------------
async def test_column_roles_the_task_and_histograms_are_computed_off_the_event_loop(tmp_path, monkeypatch):
    threads = {}
    for module, name in ((setup_screen, "describe_columns"), (setup_screen, "infer_task"),
                         (figures, "residual_histogram")):
        original = getattr(module, name)

        def spy(*args, __original=original, __name=name, **kwargs):
            threads[__name] = threading.current_thread() is threading.main_thread()
            return __original(*args, **kwargs)

        monkeypatch.setattr(module, name, spy)
    app = setup_app(diabetes_csv(tmp_path))
    assert app.screen_stack == [] and "describe_columns" not in threads  # nothing read before the screen
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await pilot.press("up")
        await settle(pilot)
    assert threads == {"describe_columns": False, "infer_task": False, "residual_histogram": False}


# ----- 19: the error curve's zoom -----------------------------------------------------------------------
async def test_z_zooms_the_error_curve_onto_the_last_stages_and_the_best_value_shows(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await add_stage(pilot, "tree", 0.1, repeat=9)
        curve = app.screen.query_one(ErrorCurve)
        view = app.screen.view
        best = view.rows[view.best]
        assert f"at {best.index}" in curve.border_subtitle
        await pilot.press("z")
        await pilot.pause()
        assert curve.zoomed and "stages 5-10" in curve.border_title
        axis = [line for line in plot_text(curve).splitlines() if line.strip()][-1]
        assert min(int(t) for t in axis.split()) >= 5
        await pilot.press("z")
        assert not curve.zoomed


# ----- the README's key table, the help and the footer agree ------------------------------------------
def readme_keys() -> set[str]:
    """Return every key the README's key table of the workbench names."""
    from pathlib import Path

    text = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    table = text[text.index("| key | does |"):]
    table = table[: table.index("\n\n")]
    keys = set()
    for line in table.splitlines()[2:]:
        keys |= set(re.findall(r"`([^`]+)`", line.split("|")[1]))
    return keys


async def test_the_readme_key_table_the_help_and_the_footer_agree(tmp_path):
    from tui.app import RemnantApp
    from tui.screens.help import key_name
    from tui.screens.setup import SetupScreen
    from tui.widgets.column_roles import ColumnRoles

    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        footer = {key_name(b.binding.key) for b in app.screen.active_bindings.values() if b.binding.show}
        helped = set()
        for _, keys in app.help_sections():
            for entry, _ in keys:
                helped |= {k.strip() for part in entry.split(" / ") for k in part.split(",")}
    documented = readme_keys()
    workbench = {key_name(k.strip()) for b in WorkbenchScreen.BINDINGS + RemnantApp.BINDINGS
                 if b.tooltip or b.description for k in b.key.split(",")}
    workbench |= {key_name(b.key) for b in SetupScreen.BINDINGS + ColumnRoles.BINDINGS + ResidualPane.BINDINGS}
    assert footer <= helped, footer - helped            # every key the footer shows is in the help
    assert footer <= documented | {"esc"}, footer - documented  # and in the README
    missing = {k for k in workbench if k not in documented and k not in ("f1", "esc", "home", "end")}
    assert not missing, missing                          # the README names every key of these screens
    assert {"ctrl+s", "p", "z", "w", "ctrl+q"} <= helped


def test_every_footer_entry_fits_in_80_columns_at_once():
    # the footer shows each key as "k desc" with one column between entries (Textual's compact Footer,
    # measured from FooterKey regions); a terminal of 80 columns must show them all, "q quit" included.
    # cancel shows only while a fit runs, when the keys that change the chain are hidden.
    from tui.app import RemnantApp

    changes = {"add_stage", "drop_stage", "trim", "undo", "audition", "grow"}
    shown = [b for b in WorkbenchScreen.BINDINGS + RemnantApp.BINDINGS if b.show and b.description]
    idle = [b for b in shown if b.action != "cancel_fit"]
    fitting = [b for b in shown if b.action not in changes]
    for entries in (idle, fitting):
        width = sum(len(b.key.split(",")[0].replace("question_mark", "?")) + 1 + len(b.description)
                    for b in entries) + len(entries) - 1
        assert width <= 80, [b.description for b in entries]


async def test_x_on_an_id_column_makes_it_a_feature_and_x_again_an_id(tmp_path):
    # scikit-learn's diabetes data with whole numbers that rise row by row: the engine reads them as row numbers, an
    # id (stages.roles.infer_role); a user who knows they count visits, a clock that may carry drift, makes them a
    # feature with x
    from tui.widgets.column_roles import ColumnRoles

    path = diabetes_csv(tmp_path)
    frame = pd.read_csv(path)
    frame.insert(1, "visit_day", 1000 + 3 * np.arange(len(frame)))
    frame.to_csv(path, index=False)
    app = setup_app(path)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot)
        screen = app.screen
        roles = screen.query_one(ColumnRoles)
        assert str(roles.get_cell("visit_day", "use")) == "id"
        await pilot.press("down", "x")  # the second row: visit_day
        assert screen.included == {"visit_day"} and not screen.excluded
        assert str(roles.get_cell("visit_day", "use")) == "numeric"
        await pilot.press("x")
        assert not screen.included and str(roles.get_cell("visit_day", "use")) == "id"
        await pilot.press("x")
        await start_chain(pilot)
        assert isinstance(app.screen, WorkbenchScreen)
        chain = app.screen.chain
        assert "visit_day" in chain.schema.names and len(chain.schema.names) == 11
        assert chain.schema.id_column == "patient"  # the rows are still named by the other id
