"""How a stage's step is chosen: out of bag, cross-fit, from the leaves or not at all; and its scale.

References: statsmodels' `fair` data (Fair 1978, A theory of extramarital affairs, Journal of
Political Economy 86:45-61; shipped with statsmodels, read offline), scikit-learn's
RandomForestRegressor(oob_score=True) for out-of-bag predictions, and scikit-learn's
cross-validation splitters for the folds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes
from sklearn.ensemble import RandomForestRegressor

import stages
from stages import steps
from stages.kinds import get_kind
from stages.kinds.base import FitRequest
from stages.losses import AbsoluteLoss, HuberLoss, LogLoss, SquaredLoss
from stages.schema import ColumnInfo

fair_data = pytest.importorskip("statsmodels.datasets.fair")


@pytest.fixture(scope="module")
def fair() -> pd.DataFrame:
    """Return statsmodels' fair data: 6,366 women, the target 'affairs' (time spent in affairs)."""
    return fair_data.load_pandas().data


@pytest.fixture(scope="module")
def fair_binary(fair) -> pd.DataFrame:
    """Return the fair data with the target binarised: any affair at all."""
    frame = fair.copy()
    frame["affairs"] = (frame["affairs"] > 0).astype(int)
    return frame


def _fair_chain(frame: pd.DataFrame, **kwargs) -> stages.Chain:
    return stages.Chain(frame, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7, **kwargs)


@pytest.mark.parametrize(("kind", "rule"), [("forest", "out-of-bag"), ("extra_trees", "cross-fit 5 folds"),
                                            ("knn", "cross-fit 5 folds"),
                                            ("sklearn:sklearn.svm.SVR", "cross-fit 5 folds")])
def test_a_strong_learner_on_a_binary_chain_no_longer_overfits_through_its_step(fair_binary, kind, rule):
    # The case: fair binarised, holdout 25 % (seed 1), chain seed 7, shrinkage 1. With the
    # step searched on the rows the forest was grown on, validation log loss went from 0.6285 to
    # 0.8394, worse than the base rate (measured before this change). Out-of-bag and out-of-fold
    # steps improve on the start instead (measured: 0.5792 forest, 0.5924 extra trees, 0.5746
    # k-NN, 0.5726 SVR).
    chain = _fair_chain(fair_binary)
    chain.add(kind, 1.0, params={"n_estimators": 30} if kind in ("forest", "extra_trees") else None)
    start, after = (s.valid["logloss"] for s in chain.scores())
    assert start == pytest.approx(0.6285, abs=1e-4)
    assert after < start
    assert chain.stages[0].step_rule == rule
    assert chain.table()["step_rule"].tolist() == ["", rule]


def test_step_rules_name_how_every_kind_chose_its_step(fair, fair_binary):
    regression = _fair_chain(fair)
    for kind in ("mean", "linear", "tree", "hist_tree", "lightgbm", "spline"):
        regression.add(kind, 0.5, params={"n_estimators": 5} if kind == "lightgbm" else None)
    regression.add("forest", 0.5, params={"n_estimators": 5, "bootstrap": False})
    assert [s.step_rule for s in regression.stages] == [
        "none (best constant)", "none (least squares)", "none (least squares)", "none (fits the loss)",
        "none (fits the loss)", "cross-fit 5 folds", "cross-fit 5 folds"]
    binary = _fair_chain(fair_binary)
    for kind in ("linear", "tree", "logistic"):
        binary.add(kind, 0.5)
    assert [s.step_rule for s in binary.stages] == ["line search on fitting rows", "Newton leaves",
                                                    "none (fits the loss)"]
    robust = _fair_chain(fair, loss="absolute")
    robust.add("tree")
    assert robust.stages[0].step_rule == "median leaves"


def test_out_of_bag_predictions_equal_scikit_learns_oob_prediction():
    # Reference: RandomForestRegressor(oob_score=True).oob_prediction_, the mean over the trees whose
    # bootstrap sample left each row out, with the same random state.
    X, y = load_diabetes(return_X_y=True)
    kind = get_kind("forest")
    params = kind.resolve_params({"n_estimators": 40}, "regression")
    request = FitRequest(X=X, columns=tuple(ColumnInfo(f"x{j}", "numeric", "float64") for j in range(10)),
                         residual=y - y.mean(), y=y, raw=np.full(len(y), y.mean()), loss=SquaredLoss(),
                         task="regression", random_state=np.random.RandomState(3))
    learner = kind.fit(request, params)
    held, has = kind.out_of_bag(learner, request)
    reference = RandomForestRegressor(**{**params, "oob_score": True}, random_state=np.random.RandomState(3))
    reference.fit(X, y - y.mean())
    assert has.all()
    np.testing.assert_allclose(held, reference.oob_prediction_, rtol=0, atol=1e-9)


def test_cross_fit_folds_are_drawn_from_the_chain_stream_so_a_refit_is_the_same(fair):
    chain = _fair_chain(fair)
    chain.add("linear")
    chain.add("knn", 0.5)
    first = chain.stages[1]
    chain.step_back()
    chain.add("knn", 0.5)
    assert chain.stages[1].scale == first.scale
    assert np.array_equal(chain.stages[1].outputs[0], first.outputs[0])
    # a chain with another seed draws other folds
    other = stages.Chain(fair, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=8)
    other.add("linear")
    other.add("knn", 0.5)
    assert other.stages[1].scale != first.scale


def test_fold_assignment_deals_a_permutation_into_folds_of_equal_size():
    assignment = steps.fold_assignment(23, 5, np.random.RandomState(0))
    # like sklearn.model_selection.KFold(shuffle=True): fold sizes differ by at most one
    assert sorted(np.bincount(assignment).tolist()) == [4, 4, 5, 5, 5]
    again = steps.fold_assignment(23, 5, np.random.RandomState(0))
    assert np.array_equal(assignment, again)


def test_a_cross_fit_on_too_few_rows_says_so_and_keeps_step_one():
    frame = pd.DataFrame({"x": np.arange(8.0), "y": np.arange(8.0) ** 2})
    chain = stages.Chain(frame, "y", stages.AllRows())
    chain.add("knn", params={"n_neighbors": 2})
    assert chain.stages[0].step_rule == "none (too few rows to cross-fit)" and chain.stages[0].step == 1.0


@pytest.mark.parametrize("scale", [1000.0, 0.01])
@pytest.mark.parametrize(("loss", "specs"), [
    ("absolute", [("linear", 1.0), ("forest", 1.0), ("knn", 1.0)]),
    ("huber", [("linear", 1.0), ("forest", 1.0), ("knn", 1.0)]),
    ("squared", [("linear", 1.0), ("forest", 0.5), ("spline", 1.0)]),
])
def test_every_loss_step_follows_the_target_scale(fair, loss, specs, scale):
    # The case: with the step searched over [0, 10], absolute loss on affairs * 1000 left
    # validation MAE unchanged (ratio 0.99995) while affairs * 0.01 dropped it by 22 %. Steps are
    # searched in the data's own units now, so y * c gives predictions * c. The rows with
    # affairs > 0 are used: on all rows the median, 0, is held by 68 % of them, and under
    # scikit-learn's tie rule every residual is then +1, so no stage but a tree can move.
    rows = fair[fair["affairs"] > 0].reset_index(drop=True)

    def fit(c: float) -> tuple[np.ndarray, list[float]]:
        frame = rows.assign(affairs=rows["affairs"] * c)
        chain = _fair_chain(frame, loss=loss)
        for kind, shrinkage in specs:
            chain.add(kind, shrinkage, params={"n_estimators": 20} if kind == "forest" else None)
        ratios = [s.valid[chain.metric] / chain.scores()[0].valid[chain.metric] for s in chain.scores()]
        return chain.predict(frame), ratios

    base, base_ratios = fit(1.0)
    scaled, ratios = fit(scale)
    assert base_ratios[1] < 0.97  # the first stage does something at every scale
    # absolute and squared steps are exact (a weighted median, a ratio of sums); Huber's is a
    # Brent search, which places a smooth minimum to about the square root of float64's epsilon
    np.testing.assert_allclose(scaled / scale, base, rtol=1e-6, atol=1e-9 * np.abs(base).max())
    np.testing.assert_allclose(ratios, base_ratios, rtol=1e-6)


def test_line_searches_find_the_minimum_of_each_loss_along_a_direction():
    rng = np.random.RandomState(0)
    y, raw, output = rng.normal(size=400) * 50, rng.normal(size=400), rng.normal(size=400)
    for loss in (SquaredLoss(), AbsoluteLoss(), HuberLoss()):
        step = loss.line_search(y, raw, output)
        objective = loss.step_objective(y, raw, output)
        grid = np.linspace(0, 4 * step, 4001)
        # reference: a fine grid over [0, 4 * step] finds nothing lower (to the grid's resolution)
        assert objective(step) <= min(objective(s) for s in grid) + 1e-9
    binary = (rng.uniform(size=400) < 0.3).astype(float)
    logloss = LogLoss()
    step = logloss.line_search(binary, np.zeros(400), binary - 0.3)
    objective = logloss.step_objective(binary, np.zeros(400), binary - 0.3)
    assert objective(step) <= min(objective(s) for s in np.linspace(0, 4 * step, 4001)) + 1e-12


def test_a_direction_that_does_not_help_gets_step_zero():
    rng = np.random.RandomState(1)
    y = rng.normal(size=200)
    away = -(y - y.mean())  # points away from every residual
    for loss in (SquaredLoss(), AbsoluteLoss(), HuberLoss()):
        assert loss.line_search(y, np.full(200, y.mean()), away) == 0.0
    assert SquaredLoss().line_search(y, y * 0, np.zeros(200)) == 0.0
