"""The ONNX export of a multiclass chain: K raw scores a row from the start values and every stage,
a softmax head, ``prediction`` (the class label) and ``probability`` ([N, K] in the stored class
order), equal in onnxruntime to the chain's own ``predict_proba`` to 1e-9.

Data: scikit-learn's wine data (Forina et al., UCI; 178 rows, 13 features, 3 cultivars), with
the cultivars named, and new rows made from it with missing values in several features.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from onnx_support import run_onnx
from sklearn.datasets import load_wine

import stages
from stages.errors import ExportError

CULTIVARS = {0: "barolo", 1: "grignolino", 2: "barbera"}
#: the kinds that convert for a multiclass chain, with small params
KINDS = [
    ("tree", {"max_depth": 3}),
    ("lightgbm", {"n_estimators": 20, "num_leaves": 7}),
    ("hist_tree", {"max_depth": 3}),
    ("forest", {"n_estimators": 8}),
    ("extra_trees", {"n_estimators": 8}),
    ("linear", {}),
    ("ridge", {"alpha": 3.0}),
    ("spline", {"n_knots": 4}),
    ("mean", {}),
]


@pytest.fixture(scope="module")
def wine() -> pd.DataFrame:
    data = load_wine(as_frame=True)
    frame = data.frame.rename(columns=lambda c: c.replace("/", "_"))
    frame["cultivar"] = frame.pop("target").map(CULTIVARS)
    return frame


@pytest.fixture(scope="module")
def new_rows(wine) -> pd.DataFrame:
    """Return 60 rows of wine's features, some values missing (rows the chain never fit on as such)."""
    rng = np.random.RandomState(3)
    rows = wine.drop(columns="cultivar").sample(60, random_state=1).reset_index(drop=True)
    for column in ("alcohol", "proline", "flavanoids", "color_intensity"):
        rows.loc[rng.choice(len(rows), 6, replace=False), column] = np.nan
    return rows


def fit_and_export(frame, kinds, tmp_path, target="cultivar", task=None):
    chain = stages.Chain(frame, target, stages.Holdout(fraction=0.25, seed=0), task=task, seed=0)
    for kind, shrinkage, params in kinds:
        chain.add(kind, shrinkage, params=params)
    report = chain.fitted().to_onnx(tmp_path / "wine.onnx")
    return chain, report


def check_same(chain, tmp_path, rows):
    got = run_onnx(tmp_path / "wine.onnx", rows, chain.schema)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        want = chain.predict_proba(rows)
        labels = chain.fitted().predict(rows)
    assert got["probability"].shape == (len(rows), len(chain.classes))
    np.testing.assert_allclose(got["probability"], want, rtol=1e-9, atol=1e-12)
    assert list(got["prediction"]) == list(labels)
    return got


@pytest.mark.parametrize(("kind", "params"), KINDS, ids=[k for k, _ in KINDS])
def test_each_multiclass_kind_gives_predict_proba_to_1e_9(kind, params, wine, new_rows, tmp_path):
    chain, report = fit_and_export(wine, [("logistic", 1.0, {}), (kind, 0.5, params)], tmp_path)
    assert report.precision == "float64" and report.share_of_tolerance <= 1.0
    check_same(chain, tmp_path, new_rows)


def test_a_chain_of_logistic_tree_lightgbm_and_forest_stages_exports_in_class_order(wine, new_rows, tmp_path):
    kinds = [("logistic", 1.0, {}), ("tree", 0.1, {"max_depth": 3}), ("tree", 0.1, {"max_depth": 3}),
             ("lightgbm", 0.5, {"n_estimators": 15, "num_leaves": 7}), ("forest", 0.5, {"n_estimators": 6})]
    chain, _ = fit_and_export(wine, kinds, tmp_path)
    got = check_same(chain, tmp_path, new_rows)
    assert chain.classes == ("barbera", "barolo", "grignolino")  # text classes are stored sorted
    np.testing.assert_allclose(got["probability"].sum(axis=1), 1.0, rtol=1e-12)
    assert set(got["prediction"]) <= set(chain.classes)


def test_a_chain_of_tree_stages_alone_exports_its_start_values(wine, new_rows, tmp_path):
    chain, _ = fit_and_export(wine, [("tree", 0.1, {"max_depth": 3})] * 5, tmp_path)
    check_same(chain, tmp_path, new_rows)


def test_whole_number_classes_come_out_as_integers(wine, new_rows, tmp_path):
    frame = wine.assign(cultivar=wine["cultivar"].map({v: k for k, v in CULTIVARS.items()}))
    chain, _ = fit_and_export(frame, [("logistic", 1.0, {}), ("tree", 0.3, {"max_depth": 2})], tmp_path,
                              task="multiclass")
    got = check_same(chain, tmp_path, new_rows)
    assert got["prediction"].dtype == np.int64


def test_a_logistic_stage_alone_and_its_probe_file_with_one_probability_column_per_class(wine, new_rows, tmp_path):
    chain, _ = fit_and_export(wine, [("logistic", 1.0, {})], tmp_path)
    check_same(chain, tmp_path, new_rows)
    probe = pd.read_csv(tmp_path / "wine.probe.csv")
    assert [c for c in probe.columns if c.startswith("probability")] == [
        "probability_barbera", "probability_barolo", "probability_grignolino"]
    assert "prediction" in probe.columns


@pytest.mark.parametrize("kind", ["knn", "sklearn:sklearn.linear_model.Ridge"])
def test_a_kind_that_cannot_convert_for_multiclass_is_refused_naming_the_stage(kind, wine, tmp_path):
    with pytest.raises(ExportError, match=rf"stage 2 \({kind}\): a multiclass stage of kind '{kind}' cannot be"):
        fit_and_export(wine, [("logistic", 1.0, {}), (kind, 0.5, {})], tmp_path)
    assert not (tmp_path / "wine.onnx").exists()
