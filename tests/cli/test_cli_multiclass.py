"""Multiclass chains on the command line: a recipe with task = "multiclass", the predictions' columns, show."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_wine

import stages
from stages.predictor import header_safe, probability_columns

RECIPE = """
[data]
path = "wine.csv"
target = "cultivar"
ignore = ["bottle"]
task = "multiclass"

[chain]
seed = 1

[validation]
scheme = "kfold"
folds = 3

[[stage]]
kind = "logistic"
params = {{ C = 0.1 }}

[[stage]]
kind = "tree"
shrinkage = 0.3
repeat = 2
"""

#: the wine data's three cultivars (Forina et al., UCI, shipped with scikit-learn), under names a
#: header cannot hold as they are
CULTIVARS = np.array(["Barolo (Nebbiolo)", "Grignolino", "Barbera d'Alba"])


@pytest.fixture
def wine(work: Path) -> Path:
    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.rename(columns=lambda c: c.replace("/", "_"))
    frame.insert(0, "bottle", [f"B{i:03d}" for i in range(len(frame))])
    frame["cultivar"] = CULTIVARS[y]
    frame.to_csv(work / "wine.csv", index=False)
    (work / "wine.toml").write_text(RECIPE.format())
    return work / "wine.csv"


def test_class_names_are_made_safe_for_a_header_and_kept_apart():
    assert header_safe("Barbera d'Alba") == "Barbera_d_Alba" and header_safe("") == "_"
    assert probability_columns(["a b", "a-b", "a_b", "ä"]) == [
        "probability_a_b", "probability_a_b_2", "probability_a_b_3", "probability__"]


def test_fit_predict_and_show_a_multiclass_chain(wine, work, run):
    status, out, err = run("fit", "wine.toml", "--out", "wine.chain")
    assert status == 0, err
    assert "logloss" in out and "accuracy" in out
    status, out, err = run("predict", "wine.chain", "wine.csv", "--id", "bottle")
    assert status == 0, err
    result = pd.read_csv(io.StringIO(out))
    fitted = stages.load(work / "wine.chain")
    assert fitted.classes == ("Barbera d'Alba", "Barolo (Nebbiolo)", "Grignolino")
    columns = ["probability_Barbera_d_Alba", "probability_Barolo__Nebbiolo_", "probability_Grignolino"]
    assert list(result.columns) == ["bottle", "prediction", *columns]
    frame = pd.read_csv(wine)
    np.testing.assert_allclose(result[columns].to_numpy(), fitted.predict_proba(frame), rtol=1e-15, atol=0)
    assert list(result["prediction"]) == list(fitted.predict(frame))
    status, out, err = run("show", "wine.chain")
    assert status == 0, err
    assert "multiclass (3 classes: \"Barbera d'Alba\", 'Barolo (Nebbiolo)', 'Grignolino')" in out


def test_each_stage_writes_the_class_after_every_stage_and_one_minus_the_true_class_probability(wine, work, run):
    assert run("fit", "wine.toml", "--out", "wine.chain")[0] == 0
    status, out, err = run("predict", "wine.chain", "wine.csv", "--each-stage")
    assert status == 0, err
    result = pd.read_csv(io.StringIO(out))
    assert [c for c in result.columns if c.startswith("after_")] == ["after_1", "after_2", "after_3"]
    assert result["after_3"].equals(result["prediction"])
    fitted = stages.load(work / "wine.chain")
    frame = pd.read_csv(wine)
    codes = pd.Categorical(frame["cultivar"], categories=list(fitted.classes)).codes
    expected = 1 - fitted.predict_proba(frame)[np.arange(len(frame)), codes]
    np.testing.assert_allclose(result["residual"], expected, rtol=0, atol=1e-12)


def test_a_class_the_chain_never_saw_is_named_when_the_target_is_read(wine, work, run):
    assert run("fit", "wine.toml", "--out", "wine.chain")[0] == 0
    frame = pd.read_csv(wine)
    frame.loc[2, "cultivar"] = "Nebbiolo d'Alba"
    frame.to_csv(work / "new.csv", index=False)
    status, out, err = run("predict", "wine.chain", "new.csv")  # the target is not read: every row is predicted
    assert status == 0 and len(pd.read_csv(io.StringIO(out))) == len(frame)
    status, out, err = run("predict", "wine.chain", "new.csv", "--each-stage")
    assert status == 2 and out == ""
    assert err.strip() == ("error: new.csv: target 'cultivar' holds \"Nebbiolo d'Alba\" (row 3), a class the chain "
                           "never saw (its classes: \"Barbera d'Alba\", 'Barolo (Nebbiolo)', 'Grignolino')")
