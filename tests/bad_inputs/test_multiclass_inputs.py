"""Classes a multiclass chain never saw: at predict time, and in the validation part only.

The chain is fit on the good table with a target of three classes (``small``, ``medium``,
``large``); the rows to predict hold a fourth, ``huge``.
"""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
import pytest
from corpus import good_frame

import stages
import tui.cli
from stages.errors import DataError

CLASSES = "'large', 'medium', 'small'"


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("multiclass_inputs")
    frame = good_frame()
    frame["y"] = ["small", "medium", "large"] * (len(frame) // 3)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0))
    chain.add("logistic")
    chain.save(folder / "three.chain")
    new = frame.copy()
    new.loc[2, "y"] = "huge"
    new.to_csv(folder / "new.csv", index=False)
    return {"chain": folder / "three.chain", "new": folder / "new.csv"}


def test_predict_does_not_read_the_target_and_gives_every_row_a_class_the_chain_knows(files, capsys):
    assert tui.cli.main(["predict", str(files["chain"]), str(files["new"])]) == 0
    result = pd.read_csv(io.StringIO(capsys.readouterr().out))
    assert len(result) == 60 and set(result["prediction"]) <= {"small", "medium", "large"}


def test_reading_the_target_names_the_unseen_class_and_its_row(files, capsys):
    message = f"new.csv: target 'y' holds 'huge' (row 3), a class the chain never saw (its classes: {CLASSES})"
    assert tui.cli.main(["predict", str(files["chain"]), str(files["new"]), "--each-stage"]) == 2
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == f"error: {message}\n"
    fitted = stages.load(files["chain"])
    with pytest.raises(DataError, match=message.replace("new.csv", "frame").replace("(", r"\(").replace(")", r"\)")):
        fitted.largest_residuals(pd.read_csv(files["new"]))
