"""A multiclass chain in the workbench: the setup screen says the target is multiclass, the add-stage
form names the kinds for K raw scores, the residual pane shows the pseudo-residuals of the class
``k`` picks (each row's own class by default), the probability of the true class and the
confusion matrix of the validation part; the views that read one raw score a row say why they
do not apply.

Data: scikit-learn's wine data (Forina et al., UCI; 178 rows, 13 features, 3 cultivars), written
as a CSV with the cultivars named. The figures are checked against the chain's own
``predict_proba`` on the validation rows and against sklearn.metrics.confusion_matrix.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_wine
from sklearn.metrics import confusion_matrix
from test_daily_use import cancer_csv  # noqa: I001
from textual.widgets import Label, Select, Static
from tui_support import add_stage, settle, setup_app, start_chain

from tui.widgets.residual_pane import SCAN_NOT_MULTICLASS, ResidualPane
from tui.widgets.stage_details import LEARNED_NOT_MULTICLASS

CULTIVARS = {0: "barolo", 1: "grignolino", 2: "barbera"}


def wine_frame() -> pd.DataFrame:
    data = load_wine(as_frame=True)
    frame = data.frame.rename(columns=lambda c: c.replace("/", "_"))
    frame["cultivar"] = frame.pop("target").map(CULTIVARS)
    return frame


def wine_csv(folder):
    path = folder / "wine.csv"
    wine_frame().to_csv(path, index=False)
    return path


def status(app) -> str:
    return str(app.screen.query_one("#result", Static).render())


def valid_probabilities(app) -> tuple[np.ndarray, np.ndarray]:
    """Return the validation rows' class codes and their n x K probabilities from the chain's predict_proba."""
    chain = app.screen.chain
    frame = wine_frame()
    rows = frame.iloc[chain.split.valid]
    codes = np.array([chain.classes.index(c) for c in rows["cultivar"]])
    return codes, chain.fitted().predict_proba(rows)


async def multiclass_chain(pilot) -> ResidualPane:
    """Fit a short chain of stumps: it still gets a few validation rows wrong."""
    await start_chain(pilot)
    await add_stage(pilot, "tree", 0.3, params={"max_depth": "1"}, repeat=2)
    return pilot.app.screen.query_one(ResidualPane)


async def test_the_setup_screen_says_a_target_of_three_classes_is_multiclass(tmp_path):
    app = setup_app(wine_csv(tmp_path), target="cultivar")
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot)
        assert str(app.screen.query_one("#task", Label).render()) == "multiclass · 3 classes"
        assert "'cultivar' has 3 classes: a multiclass chain" in str(app.screen.query_one("#setup-state").render())


async def test_the_add_stage_form_names_the_kinds_for_a_multiclass_chain(tmp_path):
    app = setup_app(wine_csv(tmp_path), target="cultivar")
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("a")
        await pilot.pause()
        kinds = app.screen.query_one("#kind", Select)
        assert kinds.value == "logistic"
        labels = [str(label) for label, _ in kinds._options]
        assert labels[0] == "logistic — multinomial logistic on the K scores"
        assert "tree — one tree per class, Newton leaves" in labels
        await pilot.press("enter")
        await settle(pilot)
        assert [r.kind for r in app.screen.view.rows] == ["start", "logistic"]


async def test_k_cycles_the_class_whose_pseudo_residuals_the_histogram_shows(tmp_path):
    app = setup_app(wine_csv(tmp_path), target="cultivar")
    async with app.run_test(size=(120, 40)) as pilot:
        pane = await multiclass_chain(pilot)
        codes, probability = valid_probabilities(app)
        onehot = np.eye(3)[codes]
        assert pane.mode == "histogram" and pane.klass is None
        assert "each row's own class" in pane.border_title and "k picks the class" in pane.border_subtitle
        figure = pane.plot.figure
        # each row's own class: 1 - p_y, from predict_proba
        own = 1.0 - probability[np.arange(len(codes)), codes]
        np.testing.assert_array_equal(figure.counts["valid"], np.histogram(own, figure.edges)[0])
        for k, name in enumerate(app.screen.chain.classes):
            await pilot.press("k")
            await settle(pilot)
            assert pane.klass == k and f"class {name}" in pane.border_title
            assert f"pseudo-residuals of class {name}" in status(app)
            figure = pane.plot.figure
            shown = onehot[:, k] - probability[:, k]
            np.testing.assert_array_equal(figure.counts["valid"], np.histogram(shown, figure.edges)[0])
            assert figure.counts["train"].sum() == len(app.screen.chain.split.train)
        await pilot.press("k")
        await settle(pilot)
        assert pane.klass is None and "each row's own class" in pane.border_title


async def test_the_probabilities_and_confusion_views_match_predict_proba_and_sklearn(tmp_path):
    app = setup_app(wine_csv(tmp_path), target="cultivar")
    async with app.run_test(size=(120, 40)) as pilot:
        pane = await multiclass_chain(pilot)
        codes, probability = valid_probabilities(app)
        await pilot.press("v")
        await settle(pilot)
        assert pane.mode == "probabilities" and pane.border_title.startswith("probability of the true class")
        true = probability[np.arange(len(codes)), codes]
        np.testing.assert_array_equal(pane.plot.figure.counts["valid"],
                                      np.histogram(true, np.linspace(0, 1, 21))[0])
        await pilot.press("v")
        await settle(pilot)
        assert pane.mode == "confusion"
        # reference: sklearn.metrics.confusion_matrix of the most probable class, classes in stored order
        expected = confusion_matrix(codes, probability.argmax(axis=1), labels=[0, 1, 2])
        lines = str(pane.rows_text.render()).splitlines()
        assert lines[0].split()[0] == "true"
        for name, line, counts in zip(app.screen.chain.classes, lines[1:], expected, strict=True):
            assert line.split()[0] == name and [int(v) for v in line.split()[1:4]] == list(counts)
        assert 0 < np.trace(expected) < expected.sum()  # some rows wrong: the matrix is not just its diagonal
        shown = re.search(r"accuracy ([0-9.]+) of (\d+) rows", pane.border_subtitle)
        assert float(shown[1]) == pytest.approx(np.trace(expected) / expected.sum(), abs=1e-3)
        assert int(shown[2]) == expected.sum()


async def test_the_views_for_one_raw_score_say_why_they_do_not_apply(tmp_path):
    app = setup_app(wine_csv(tmp_path), target="cultivar")
    async with app.run_test(size=(120, 40)) as pilot:
        pane = await multiclass_chain(pilot)
        details = str(app.screen.query_one("#learned-body").render())
        assert " ".join(details.split()) == LEARNED_NOT_MULTICLASS
        while pane.mode != "feature":
            await pilot.press("v")
            await settle(pilot)
        assert pane.plot.figure is None and pane.plot.message == SCAN_NOT_MULTICLASS
        assert "not for a multiclass chain" in pane.border_title
        await pilot.press("v")
        await settle(pilot)
        assert pane.mode == "histogram"  # the cycle goes round
        await pilot.press("m")  # the references fit on a multiclass chain too
        await settle(pilot)
        assert "failed" not in status(app)


async def test_the_largest_residuals_name_the_classes(tmp_path):
    app = setup_app(wine_csv(tmp_path), target="cultivar")
    async with app.run_test(size=(80, 24)) as pilot:
        pane = await multiclass_chain(pilot)
        while pane.mode != "largest":
            await pilot.press("v")
            await settle(pilot)
        lines = str(pane.rows_text.render()).splitlines()
        assert lines[0].split()[:3] == ["row", "actual", "p"]
        assert lines[1].split()[1] in CULTIVARS.values()


async def test_k_on_a_binary_chain_says_it_is_for_multiclass_chains(tmp_path):
    app = setup_app(cancer_csv(tmp_path), target="malignant")
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "logistic")
        await pilot.press("k")
        await settle(pilot)
        assert "k picks the class of a multiclass chain's residuals; this chain is binary" in status(app)
