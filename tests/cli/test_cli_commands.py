"""The commands as a user runs them: fit, show, predict, demo and explore, with their output."""

from __future__ import annotations

import io
import sys
import types

import numpy as np
import pandas as pd
import pytest
from cli_support import numbers, write_recipe
from sklearn.linear_model import LinearRegression
from sklearn.metrics import mean_squared_error

import stages
from tui import cli

COMMANDS = ["demo", "explore", "fit", "predict", "show", "export"]


def same_predictions(a: str, b: str) -> bool:
    """Return True when two prediction CSVs hold the same text: same columns, rows and bits."""
    return a == b


def test_version_prints_the_installed_version(run):
    from importlib import metadata

    status, out, _ = run("--version")
    assert status == 0 and out == f"remnant {metadata.version('remnant')}\n"


@pytest.mark.parametrize("command", [None, *COMMANDS])
def test_every_command_has_help(run, command):
    status, out, _ = run(*([command] if command else []), "--help")
    assert status == 0
    assert out.startswith(f"usage: remnant{' ' + command if command else ''}")
    if command is None:
        assert all(name in out for name in COMMANDS)


def test_a_usage_mistake_is_one_error_line_with_status_2(run):
    status, out, err = run("predict", "only-one-argument")
    assert (status, out) == (2, "")
    assert err.startswith("error: the following arguments are required: DATA") and err.count("\n") == 1


def test_fit_prints_the_stage_table_and_writes_a_chain_that_show_reads_back(work, run):
    status, out, err = run("fit", "diabetes.toml", "--out", "d.chain")
    assert status == 0, err
    lines = out.splitlines()
    assert lines[0].split()[:5] == ["stage", "kind", "shrink", "train", "rmse"]
    assert [line.split()[1] for line in lines[1:]] == ["start", "linear", "tree", "tree"]
    assert "caution:" in err and "leakage" in err
    status, shown, _ = run("show", "d.chain")
    assert status == 0
    assert out in shown  # the same table, from the scores the manifest stored
    assert "band" in shown and "categorical" in shown and "holdout 25% (seed 3)" in shown


def test_the_csv_table_holds_the_chain_scores_at_full_precision(work, run):
    status, out, _ = run("fit", "diabetes.toml", "--out", "d.chain", "--format", "csv")
    assert status == 0
    table = pd.read_csv(io.StringIO(out))
    chain = stages.fit_recipe("diabetes.toml")
    expected = chain.table()
    assert list(table.columns) == list(expected.columns)
    assert np.allclose(table["valid_rmse"], expected["valid_rmse"], rtol=0, atol=0)
    status, again, _ = run("show", "d.chain", "--format", "csv")
    assert pd.read_csv(io.StringIO(again)).drop(columns="seconds").equals(table.drop(columns="seconds"))


def test_a_linear_chain_predicts_what_scikit_learn_least_squares_predicts(work, run):
    frame = pd.read_csv(work / "diabetes.csv").drop(columns=["band"])
    frame["split"] = np.where(np.arange(len(frame)) % 4 == 0, "valid", "train")
    frame.to_csv(work / "split.csv", index=False)
    write_recipe(work, """
        [data]
        path = "split.csv"
        target = "progression"
        ignore = ["patient"]
        [validation]
        scheme = "column"
        column = "split"
        [[stage]]
        kind = "linear"
        """, "split.toml")
    status, out, err = run("fit", "split.toml", "--out", "s.chain", "--format", "csv")
    assert status == 0, err
    # reference: scikit-learn's LinearRegression on the same training rows
    features = [c for c in frame.columns if c not in ("patient", "split", "progression")]
    train, valid = frame[frame.split == "train"], frame[frame.split == "valid"]
    reference = LinearRegression().fit(train[features], train.progression)
    status, predicted, _ = run("predict", "s.chain", "split.csv")
    assert np.allclose(numbers(predicted), reference.predict(frame[features]), rtol=1e-9, atol=1e-9)
    rmse = mean_squared_error(valid.progression, reference.predict(valid[features])) ** 0.5
    assert pd.read_csv(io.StringIO(out))["valid_rmse"].iloc[1] == pytest.approx(rmse, rel=1e-9)


def test_predict_writes_one_row_per_input_row_in_order_with_the_id_first(fitted_files, work, run):
    status, out, _ = run("predict", fitted_files["regression"], "diabetes.csv", "--id", "patient")
    assert status == 0
    result = pd.read_csv(io.StringIO(out))
    frame = pd.read_csv(work / "diabetes.csv")
    assert list(result.columns) == ["patient", "prediction"]
    assert result["patient"].tolist() == frame["patient"].tolist()
    assert np.array_equal(result["prediction"].to_numpy(), stages.load(fitted_files["regression"]).predict(frame))


def test_predict_reads_parquet_and_writes_the_same_as_for_csv(fitted_files, work, run):
    pd.read_csv(work / "diabetes.csv").to_parquet(work / "diabetes.parquet")
    _, from_csv, _ = run("predict", fitted_files["regression"], "diabetes.csv")
    status, from_parquet, _ = run("predict", fitted_files["regression"], "diabetes.parquet", "--chunk-rows", "50")
    assert status == 0
    assert same_predictions(from_parquet, from_csv)


def test_reading_in_chunks_of_seven_rows_gives_the_same_output_as_one_chunk(fitted_files, run):
    for kind, data in (("regression", "diabetes.csv"), ("binary", "cancer.csv")):
        _, whole, _ = run("predict", fitted_files[kind], data)
        status, chunked, _ = run("predict", fitted_files[kind], data, "--chunk-rows", "7")
        assert status == 0
        assert same_predictions(chunked, whole)


def test_a_binary_chain_writes_the_class_and_its_probability(fitted_files, work, run):
    status, out, err = run("predict", fitted_files["binary"], "cancer.csv", "--out", "scores.csv")
    assert status == 0 and out == "", err
    result = pd.read_csv(work / "scores.csv")
    assert list(result.columns) == ["prediction", "probability"]
    fitted = stages.load(fitted_files["binary"])
    frame = pd.read_csv(work / "cancer.csv")
    assert np.array_equal(result["probability"].to_numpy(), fitted.predict_proba(frame)[:, 1])
    assert np.array_equal(result["prediction"].to_numpy(), fitted.predict(frame))
    assert set(result["prediction"]) == {0, 1}


def test_predict_ignores_extra_columns_and_warns_once_about_unseen_levels(fitted_files, work, run):
    frame = pd.read_csv(work / "diabetes.csv")
    frame["extra"] = 1.0
    frame.loc[:9, "band"] = "enormous"
    frame.to_csv(work / "new.csv", index=False)
    status, out, err = run("predict", fitted_files["regression"], "new.csv", "--chunk-rows", "4")
    assert status == 0 and len(pd.read_csv(io.StringIO(out))) == len(frame)
    assert err.splitlines() == ["warning: new.csv: values the chain cannot use (category levels never seen in "
                                "training, text, infinity or a value beyond ±3.4e38 in a numeric column) were "
                                "treated as missing ('band': 10)"]


def test_fit_with_data_fits_the_recipe_on_another_file(work, run):
    pd.read_csv(work / "diabetes.csv").iloc[:300].to_csv(work / "first300.csv", index=False)
    status, _, err = run("fit", "diabetes.toml", "--data", "first300.csv", "--out", "d300.chain")
    assert status == 0, err
    fitted = stages.load(work / "d300.chain")
    assert sum(fitted.meta["rows"].values()) == 300


def test_demo_headless_fits_the_demo_recipe(run):
    status, out, err = run("demo", "--headless")
    assert status == 0, err
    assert [line.split()[1] for line in out.splitlines()[1:]] == ["start", "linear", "tree", "lightgbm", "spline"]
    assert "caution:" in err


def test_demo_and_explore_open_the_workbench_with_the_right_files(work, fitted_files, monkeypatch, run):
    calls = []
    fake = types.ModuleType("tui.app")
    fake.run = lambda **kwargs: calls.append(kwargs) or 0
    monkeypatch.setitem(sys.modules, "tui.app", fake)
    assert run("explore", "diabetes.csv", "--target", "progression")[0] == 0
    assert run("explore", fitted_files["regression"])[0] == 0
    assert run("demo")[0] == 0
    assert calls[0] == {"data_path": "diabetes.csv", "target": "progression"}
    assert calls[1] == {"chain_path": str(fitted_files["regression"])}
    assert calls[2]["recipe_path"].endswith("deliveries.toml")
    assert cli.demo_folder().joinpath("deliveries.csv").exists()


class FakeTerminal(io.StringIO):
    """A text stream that says it is a terminal."""

    def isatty(self) -> bool:
        return True


def test_progress_is_one_rewritten_line_on_a_terminal_and_nothing_elsewhere():
    terminal, pipe = FakeTerminal(), io.StringIO()
    for stream in (terminal, pipe):
        progress = cli.Progress(stream)
        progress(1.0, "stage 1 of 1: done")
        progress.clear()
    assert terminal.getvalue().startswith("\r100%  stage 1 of 1: done") and terminal.getvalue().endswith("\r")
    assert "\n" not in terminal.getvalue() and pipe.getvalue() == ""
