"""Where the error lives and what each stage learned, on the screen: the scan's ranking with the
residuals against the highlighted feature, the stage's coefficients with intervals, its spline
curves and partial dependence, the largest residuals and the calibration of a binary chain.
Everything computed in a worker and cached per chain state; bounded samples say how many rows.

Data: the demo's deliveries (its story, demo/README.md, is what the scan must lead to) and
scikit-learn's diabetes and breast cancer data written as CSV files.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
from sklearn.calibration import calibration_curve
from test_daily_use import cancer_csv  # noqa: I001
from textual.widgets import Static
from tui_support import add_stage, diabetes_csv, settle, setup_app, start_chain

from tui import answers
from tui.demo_app import demo_app
from tui.widgets.residual_pane import ResidualPane
from tui.widgets.stage_details import StageDetails


async def to_mode(pilot, mode: str) -> ResidualPane:
    pane = pilot.app.screen.query_one(ResidualPane)
    for _ in range(6):
        if pane.mode == mode:
            break
        await pilot.press("v")
    await settle(pilot)
    assert pane.mode == mode
    return pane


def details_text(screen) -> str:
    return str(screen.query_one("#details-body").render()) + str(screen.query_one("#learned-body").render())


async def test_following_the_scan_finds_the_demo_story():
    app = demo_app(timings=False)
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot)
        screen = app.screen
        await pilot.press("home", "down")  # the chain after its linear start
        pane = await to_mode(pilot, "feature")
        # reference: the engine's own scan of the same chain state
        expected = screen.chain.residual_scan(upto=1)
        assert pane._ranked() == list(expected["feature"])
        assert pane._ranked()[0] == "hour" and pane.feature == "hour"
        ranking = str(pane.ranking.render())
        assert re.search(r"▸hour\s+\d+%\*", ranking)
        # the binned residuals drawn are the engine's: the rush hours stand out
        figure = pane.plot.figure
        binned = screen.chain.binned_residuals("hour", upto=1)
        kept = binned[binned["rows"] > 0]
        np.testing.assert_allclose(figure.mean, kept["mean_residual"])
        rush = dict(zip(figure.labels, figure.mean, strict=True))
        assert rush["17"] > 10 and rush["12"] < 5
        # the details follow the highlighted feature: the linear stage's partial dependence on hour
        assert "partial dependence on hour" in details_text(screen)
        pane.focus()
        await pilot.press("down")
        await settle(pilot)
        assert pane.feature == pane._ranked()[1] == "outside_temp_c"
        assert "partial dependence on outside_temp_c" in details_text(screen)
        await pilot.press("w")
        await settle(pilot)
        assert "distance_km" in pane._ranked()[:2]  # the noise that widens with distance
        assert "spread widens" in str(screen.query_one("#result").render())


async def test_a_linear_stage_shows_its_coefficients_with_intervals(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        text = details_text(app.screen)
        # reference: the engine's coefficients (checked against statsmodels OLS in tests/engine)
        table = app.screen.chain.coefficients(1)
        bmi = table[table["term"] == "bmi"].iloc[0]
        line = next(line for line in text.splitlines() if line.startswith("bmi ") and "[" in line)
        coefficient, low, high = (float(v) for v in re.findall(r"[-+]?\d+(?:\.\d+)?", line)[:3])
        assert abs(coefficient - bmi["coefficient"]) < 0.01 * abs(bmi["coefficient"])
        assert abs(low - bmi["ci_low"]) < 0.01 * abs(bmi["ci_low"]) and abs(high - bmi["ci_high"]) < 0.01 * abs(
            bmi["ci_high"])
        assert "95% intervals, conditional on the stages before it" in text


async def test_a_spline_stage_shows_its_curves(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "spline", 0.5)
        text = details_text(app.screen)
        assert "curves (what the stage adds along each feature)" in text
        assert re.search(r"bmi\s+[▁▂▃▄▅▆▇█]{8,}", text)


async def test_the_answers_are_cached_per_stage_and_bounded_samples_say_how_many_rows(tmp_path, monkeypatch):
    monkeypatch.setattr(answers, "SCAN_SAMPLE", 50)  # as at a million rows: a bounded sample
    calls = []
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        await add_stage(pilot, "tree", 0.5)
        chain = app.screen.chain
        original = chain.residual_scan

        def counted(*args, **kwargs):
            calls.append(kwargs)
            return original(*args, **kwargs)

        chain.residual_scan = counted
        pane = await to_mode(pilot, "feature")
        assert calls[-1]["sample"] == 50
        assert "50 rows" in pane.border_subtitle
        await pilot.press("up")
        await settle(pilot)
        await pilot.press("down")
        await settle(pilot)
        assert len(calls) == 2  # stage 2, stage 1; back on stage 2 the answer is kept


async def test_a_binary_chain_shows_its_calibration_as_scikit_learn_computes_it(tmp_path):
    app = setup_app(cancer_csv(tmp_path), target="malignant")
    async with app.run_test(size=(120, 40)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "logistic")
        pane = await to_mode(pilot, "calibration")
        figure = pane.plot.figure
        source = app.screen.view.residuals
        # reference: scikit-learn's calibration curve on the same validation rows and uniform bins
        observed, predicted = calibration_curve(source.targets("valid"), source.fitted("valid", 1), n_bins=10)
        np.testing.assert_allclose(figure.observed, observed, rtol=1e-12)
        np.testing.assert_allclose(figure.predicted, predicted, rtol=1e-12)
        assert pane.border_title.startswith("calibration · stage 1")


async def test_the_new_views_read_without_colour_and_fit_80x24(tmp_path, monkeypatch):
    from test_looks import colours

    monkeypatch.setenv("NO_COLOR", "1")
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear")
        for mode in ("feature", "largest"):
            pane = await to_mode(pilot, mode)
            assert pane.display and pane.size.width >= 30
            used = colours(app.export_screenshot())
            assert all(c[1:3] == c[3:5] == c[5:7] for c in used), sorted(used)
        await pilot.press("p")
        await settle(pilot)
        assert app.screen.query_one(StageDetails).display
        assert "importance (|coefficient| standardised)" in details_text(app.screen)
        assert isinstance(app.screen.query_one("#result"), Static)


def test_the_largest_residual_ids_are_kept_compactly():
    ids = answers.compact_ids(pd.Series([f"P{i:05d}" for i in range(1000)]))
    assert str(ids.dtype).startswith("string") and ids.iloc[[3, 1]].tolist() == ["P00003", "P00001"]
    assert answers.compact_ids(pd.Series(np.arange(5))).dtype == np.int64
