"""Bad input through the command line: status 2, one ``error:`` line, no traceback, nothing overwritten."""

from __future__ import annotations

import io
import json
import zipfile
from pathlib import Path

import pandas as pd
import pytest
from cli_support import REGRESSION_RECIPE, assert_one_error, write_recipe

PRECIOUS = b"an earlier result the user wants to keep\n"


@pytest.fixture
def keep(work: Path) -> Path:
    """Return an existing --out file whose bytes must survive every failed command."""
    path = work / "keep.out"
    path.write_bytes(PRECIOUS)
    return path


def fit_fails(run, keep: Path, *args: str) -> str:
    status, out, err = run("fit", *args, "--out", keep)
    assert out == ""
    assert keep.read_bytes() == PRECIOUS
    return status, err


# ----------------------------------------------------------------------------- data files


def test_an_empty_data_file(work, run, keep):
    (work / "empty.csv").write_bytes(b"")
    assert_one_error(*fit_fails(run, keep, "diabetes.toml", "--data", "empty.csv"), "empty.csv", "empty")


def test_a_data_file_with_only_a_header(work, run, keep):
    (work / "header.csv").write_text("patient,age,progression\n")
    assert_one_error(*fit_fails(run, keep, "diabetes.toml", "--data", "header.csv"),
                     "header.csv: the file has a header but no rows")


def test_a_delimiter_that_is_not_sniffed_leaves_one_column_and_no_target(work, run, keep):
    frame = pd.read_csv(work / "diabetes.csv")
    frame.to_csv(work / "colons.csv", sep=":", index=False)
    assert_one_error(*fit_fails(run, keep, "diabetes.toml", "--data", "colons.csv"),
                     "target 'progression' is not a column of colons.csv")


def test_a_semicolon_file_is_sniffed_and_fits(work, run):
    pd.read_csv(work / "diabetes.csv").to_csv(work / "semi.csv", sep=";", index=False)
    status, _, err = run("fit", "diabetes.toml", "--data", "semi.csv", "--out", "semi.chain")
    assert status == 0, err


def test_a_target_that_is_not_a_column(work, run, keep):
    write_recipe(work, REGRESSION_RECIPE.replace('target = "progression"', 'target = "outcome"'))
    assert_one_error(*fit_fails(run, keep, "recipe.toml"),
                     "recipe.toml line 3: target 'outcome' is not a column of diabetes.csv")


def test_a_target_that_is_not_numeric(work, run, keep):
    frame = pd.read_csv(work / "diabetes.csv").astype({"progression": object})
    frame.loc[16, "progression"] = "unknown"  # not "n/a", which pandas reads as missing
    frame.to_csv(work / "text_target.csv", index=False)
    assert_one_error(*fit_fails(run, keep, "diabetes.toml", "--data", "text_target.csv"),
                     "text_target.csv: target 'progression' is not numeric (row 17: 'unknown')")


def test_out_may_not_be_the_input_data_file(work, run):
    before = (work / "diabetes.csv").read_bytes()
    status, _, err = run("fit", "diabetes.toml", "--out", "diabetes.csv")
    assert_one_error(status, err, "--out diabetes.csv is the input data file")
    assert (work / "diabetes.csv").read_bytes() == before


def test_out_in_a_folder_that_does_not_exist(work, run):
    status, _, err = run("fit", "diabetes.toml", "--out", "no/such/folder/x.chain")
    assert_one_error(status, err, "does not exist")


# ----------------------------------------------------------------------------- recipes

RECIPE_MISTAKES = [
    ('kind = "linear"', 'kind = "linear"\nfeatures = ["nope"]', "line 16: [[stage]] 'linear': feature 'nope'"),
    ('ignore = ["patient"]', 'ignore = ["patient"]\nfeatures = ["age", "sexx"]', "line 5: features 'sexx' is not a column"),
    ("shrinkage = 0.5", "shrinkge = 0.5", "line 19: unknown key 'shrinkge' in [[stage]]"),
    ('kind = "tree"', 'kind = "trees"', "line 18: unknown stage kind 'trees'"),
    ("max_depth = 2", "depth = 2", "line 21: kind 'tree' has no parameter 'depth'"),
    ("[chain]", "[chains]", "line 6: unknown table [chains]"),
    ("seed = 3", "seed = 3.5", "line 8: seed must be a whole number, not 3.5"),
]


@pytest.mark.parametrize(("old", "new", "message"), RECIPE_MISTAKES, ids=[m[2].split(": ", 1)[1][:30] for m in RECIPE_MISTAKES])
def test_recipe_mistakes_name_the_recipe_and_line(work, run, keep, old, new, message):
    write_recipe(work, REGRESSION_RECIPE.replace(old, new, 1))
    assert_one_error(*fit_fails(run, keep, "recipe.toml"), f"recipe.toml {message}")


def test_a_recipe_that_does_not_exist(work, run, keep):
    assert_one_error(*fit_fails(run, keep, "nowhere.toml"), "nowhere.toml: no such file")


# ----------------------------------------------------------------------------- chain files


def damaged(source: Path, target: Path, how: str) -> Path:
    """Write a damaged copy of a chain file: truncated, a byte flipped, a member changed, or a newer format."""
    data = source.read_bytes()
    if how == "truncated":
        target.write_bytes(data[: len(data) // 2])
    elif how == "byte flipped":
        middle = len(data) // 3
        target.write_bytes(data[:middle] + bytes([data[middle] ^ 0xFF]) + data[middle + 1:])
    else:
        with zipfile.ZipFile(source) as old, zipfile.ZipFile(target, "w") as new:
            for info in old.infolist():
                payload = old.read(info)
                if how == "member changed" and info.filename.startswith("stages/001"):
                    payload = payload.replace(b"1", b"2", 1)
                if how == "newer format" and info.filename == "manifest.json":
                    manifest = json.loads(payload)
                    manifest["format_version"] = 99
                    payload = json.dumps(manifest).encode()
                new.writestr(info, payload)
    return target


DAMAGE = ["truncated", "byte flipped", "member changed", "newer format"]


@pytest.mark.parametrize("how", DAMAGE)
def test_a_damaged_chain_file_is_refused_by_show_and_predict(fitted_files, work, run, keep, how):
    bad = damaged(fitted_files["regression"], work / "bad.chain", how)
    status, out, err = run("show", bad)
    assert out == ""
    assert_one_error(status, err, "bad.chain")
    status, out, err = run("predict", bad, "diabetes.csv", "--out", keep)
    assert out == "" and keep.read_bytes() == PRECIOUS
    assert_one_error(status, err, "bad.chain")


def test_a_data_file_given_as_the_chain_file(work, run):
    assert_one_error(*run("show", "diabetes.csv")[::2], "diabetes.csv")


# ----------------------------------------------------------------------------- predicting


def predict_fails(run, keep: Path, chain: Path, data: str, *args: str):
    status, out, err = run("predict", chain, data, "--out", keep, *args)
    assert out == "" and keep.read_bytes() == PRECIOUS
    return status, err


def test_predict_names_a_missing_column(fitted_files, work, run, keep):
    pd.read_csv(work / "diabetes.csv").drop(columns=["bmi"]).to_csv(work / "no_bmi.csv", index=False)
    assert_one_error(*predict_fails(run, keep, fitted_files["regression"], "no_bmi.csv"),
                     "no_bmi.csv: column 'bmi' is missing")


def test_predict_names_an_unknown_id_column(fitted_files, run, keep):
    assert_one_error(*predict_fails(run, keep, fitted_files["regression"], "diabetes.csv", "--id", "pid"),
                     "id column 'pid' is not a column")


def test_predict_names_the_row_of_a_bad_value_in_a_later_chunk(fitted_files, work, run, keep):
    frame = pd.read_csv(work / "diabetes.csv").astype({"age": object})
    frame.loc[14:20, "age"] = "old"  # the whole third chunk is text: the column's type changed
    frame.to_csv(work / "bad_age.csv", index=False)
    assert_one_error(*predict_fails(run, keep, fitted_files["regression"], "bad_age.csv", "--chunk-rows", "7"),
                     "column 'age' was numeric when the chain was fit, but row 15 holds 'old'")


def test_predict_treats_a_stray_text_in_a_numeric_column_as_missing_with_a_warning(fitted_files, work, run):
    frame = pd.read_csv(work / "diabetes.csv").astype({"age": object})
    frame.loc[19, "age"] = "old"
    frame.to_csv(work / "stray_age.csv", index=False)
    status, out, err = run("predict", fitted_files["regression"], "stray_age.csv", "--chunk-rows", "7")
    assert status == 0
    assert len(pd.read_csv(io.StringIO(out))) == len(frame)
    assert "warning:" in err and "'age'" in err


@pytest.mark.parametrize(("header", "message"), [(False, "the file is empty"),
                                                 (True, "the file has a header but no rows")])
def test_predict_refuses_an_empty_or_header_only_file(fitted_files, work, run, keep, header, message):
    first_line = (work / "diabetes.csv").read_text().splitlines(keepends=True)[0]
    (work / "thin.csv").write_text(first_line if header else "")
    assert_one_error(*predict_fails(run, keep, fitted_files["regression"], "thin.csv"), f"thin.csv: {message}")


def test_predict_out_may_not_be_the_data_or_the_chain(fitted_files, work, run):
    before = (work / "diabetes.csv").read_bytes()
    status, _, err = run("predict", fitted_files["regression"], "diabetes.csv", "--out", "diabetes.csv")
    assert_one_error(status, err, "is the input data file")
    assert (work / "diabetes.csv").read_bytes() == before
    status, _, err = run("predict", fitted_files["regression"], "diabetes.csv", "--out", fitted_files["regression"])
    assert_one_error(status, err, "is the chain file")


def test_explore_names_a_missing_file(work, run):
    assert_one_error(*run("explore", "missing.csv")[::2], "missing.csv: no such file")
