"""The command line with an id column and date features: ``predict --id`` alone names the rows with the
chain's id column, date features are derived again from the data's date column, and an exported
recipe holds only the keys that apply to its task.

Data: scikit-learn's diabetes data with a ``patient`` id (see cli_support), and the same rows
with a visit date added, one day apart.
"""

from __future__ import annotations

import io
import re
import tomllib

import numpy as np
import pandas as pd
from cli_support import assert_one_error, write_recipe

import stages
from stages.files.recipe import chain_to_recipe

DATED = """
[data]
path = "visits.csv"
target = "progression"
dates = { visit = ["month", "day_of_week"] }

[chain]
seed = 0

[validation]
scheme = "holdout"
fraction = 0.25

[[stage]]
kind = "linear"

[[stage]]
kind = "tree"
shrinkage = 0.5
params = { max_depth = 2 }
"""


def test_predict_id_alone_copies_the_column_the_chain_found_to_name_the_rows(fitted_files, work, run):
    assert stages.load(fitted_files["regression"]).schema.id_column == "patient"
    status, out, err = run("predict", fitted_files["regression"], "diabetes.csv", "--id")
    assert status == 0, err
    result = pd.read_csv(io.StringIO(out))
    frame = pd.read_csv(work / "diabetes.csv")
    assert list(result.columns) == ["patient", "prediction"]
    assert result["patient"].tolist() == frame["patient"].tolist()


def test_predict_id_alone_on_a_chain_without_an_id_column_says_so(fitted_files, work, run):
    status, _, err = run("predict", fitted_files["binary"], "cancer.csv", "--id")
    assert_one_error(status, err, "--id", "names no id column", "--id COL")


def test_a_recipe_with_date_features_fits_and_predict_derives_them_again(work, run):
    frame = pd.read_csv(work / "diabetes.csv")
    frame["visit"] = pd.date_range("2024-01-01", periods=len(frame), freq="D").strftime("%Y-%m-%d")
    frame.to_csv(work / "visits.csv", index=False)
    write_recipe(work, DATED, "visits.toml")
    status, _, err = run("fit", "visits.toml", "--out", "visits.chain")
    assert status == 0, err
    fitted = stages.load(work / "visits.chain")
    assert fitted.schema.dates() == {"visit": ("month", "day_of_week")}
    assert fitted.schema.names[-2:] == ["visit_month", "visit_day_of_week"]
    status, out, err = run("predict", "visits.chain", "visits.csv", "--id")
    assert status == 0, err
    result = pd.read_csv(io.StringIO(out))
    assert result["patient"].tolist() == frame["patient"].tolist()
    np.testing.assert_array_equal(result["prediction"].to_numpy(), fitted.predict(frame))
    status, _, err = run("predict", "visits.chain", "diabetes.csv")
    assert_one_error(status, err, "column 'visit' is missing")


def test_an_exported_recipe_writes_only_the_keys_of_its_task(work):
    regression = stages.Chain.from_file(work / "diabetes.csv", "progression", stages.Holdout(seed=0))
    written = tomllib.loads(chain_to_recipe(regression))
    assert "threshold" not in written["chain"] and "stratify" not in written["validation"]
    assert "positive" not in written["data"]
    binary = stages.Chain.from_file(work / "cancer.csv", "malignant", stages.Holdout(seed=0), threshold=0.3)
    written = tomllib.loads(chain_to_recipe(binary))
    assert written["chain"]["threshold"] == 0.3 and written["validation"]["stratify"] is True


def test_every_key_the_recipe_writer_emits_is_documented_in_the_readme(work):
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    block = readme[readme.index("## Recipes"):]
    block = block[block.index("```toml"): block.index("```", block.index("```toml") + 7)]
    documented = set(re.findall(r"^#?\s*([a-z_]+) =", block, re.M))
    frame = pd.read_csv(work / "cancer.csv")
    frame["seen"] = pd.date_range("2024-01-01", periods=len(frame), freq="h").strftime("%Y-%m-%d %H:%M")
    frame.to_csv(work / "seen.csv", index=False)
    chain = stages.Chain.from_file(work / "seen.csv", "malignant", stages.KFold(folds=3, seed=1, stratify=False),
                                   threshold=0.4, positive="1", dates={"seen": ["hour"]},
                                   features=["mean_radius", "mean_texture"])
    chain.add("logistic")
    chain.add("tree", 0.3, params={"max_depth": 2}, repeat=2)
    written = tomllib.loads(chain_to_recipe(chain))
    emitted = set(written["data"]) | set(written["chain"]) | set(written["validation"])
    emitted |= {key for entry in written["stage"] for key in entry}
    assert emitted - documented == set(), emitted - documented
