"""Weights, exposure and the count losses through recipes, chain files, sessions and `remnant predict`.

The data is the RAND Health Insurance Experiment sample shipped with statsmodels
(statsmodels.datasets.randhie): mdvis counts outpatient visits; exp(lncoins), a positive column
of its own (the coinsurance rate plus 1), stands in as the exposure, and 1 + physlm as a weight.
"""

from __future__ import annotations

import json
import textwrap
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from statsmodels.datasets import randhie

import stages
from stages.errors import ChainFileError, RecipeError
from stages.files.recipe import fit_recipe, parse_recipe, read_recipe
from stages.files.session import load_session, save_session

RECIPE = """
[data]
path = "visits.csv"
target = "mdvis"
weight = "w"
exposure = "coins"

[chain]
loss = "poisson"

[validation]
scheme = "holdout"
fraction = 0.25

[[stage]]
kind = "glm"

[[stage]]
kind = "tree"
shrinkage = 0.2
repeat = 3
"""


def members_of(path: Path) -> dict[str, bytes]:
    with zipfile.ZipFile(path) as archive:
        return {name: archive.read(name) for name in archive.namelist()}


def write_members(path: Path, members: dict[str, bytes]) -> None:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, payload in members.items():
            archive.writestr(name, payload)


def _visits(rows: int = 800) -> pd.DataFrame:
    data = randhie.load_pandas().data.iloc[:rows].reset_index(drop=True)
    frame = data[["idp", "lpi", "fmde", "physlm", "disea", "mdvis"]].copy()
    frame["coins"] = np.exp(data["lncoins"])
    frame["w"] = 1.0 + data["physlm"]
    return frame


@pytest.fixture
def visits(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    _visits().to_csv(tmp_path / "visits.csv", index=False)
    (tmp_path / "visits.toml").write_text(textwrap.dedent(RECIPE))
    monkeypatch.chdir(tmp_path)
    return tmp_path


def test_a_recipe_with_weight_exposure_and_loss_fits_and_writes_them_back(visits):
    chain = fit_recipe(read_recipe(visits / "visits.toml"))
    assert chain.weight_column == "w" and chain.exposure_column == "coins" and chain.loss.name == "poisson"
    text = chain.to_recipe()
    assert 'weight = "w"' in text and 'exposure = "coins"' in text and 'loss = "poisson"' in text
    assert "power" not in text and "ignore" not in text  # only the keys that apply
    again = fit_recipe(parse_recipe(text, visits))
    np.testing.assert_array_equal(again.outputs()[0], chain.outputs()[0])


def test_a_tweedie_recipe_writes_its_power(visits):
    recipe = RECIPE.replace('loss = "poisson"', 'loss = "tweedie"\npower = 1.3')
    chain = fit_recipe(parse_recipe(textwrap.dedent(recipe), visits))
    assert chain.loss.power == 1.3
    assert "power = 1.3" in chain.to_recipe()


@pytest.mark.parametrize(("change", "words"), [
    (('loss = "poisson"', 'loss = "poisson"\npower = 1.5'), 'power is for loss = "tweedie" only'),
    (('loss = "poisson"', 'loss = "tweedie"\npower = 2.5'), "power must be a number strictly between 1 and 2"),
    (('loss = "poisson"', 'loss = "tweedie"\npower = "x"'), "power must be a number strictly between 1 and 2"),
    (('weight = "w"', 'weight = "mdvis"'), "weight 'mdvis' is the target"),
    (('weight = "w"', 'weight = "coins"'), "weight and exposure both name 'coins'"),
    (('weight = "w"', 'weight = "wt"'), "weight 'wt' is not a column of visits.csv"),
    (('weight = "w"', "weight = 3"), "weight"),
])
def test_a_bad_weight_exposure_or_power_in_a_recipe_names_its_line(visits, change, words):
    text = textwrap.dedent(RECIPE).replace(*change)
    with pytest.raises(RecipeError, match=words.replace("(", r"\(")):
        fit_recipe(parse_recipe(text, visits))


def test_the_chain_file_records_weight_exposure_and_power(visits, tmp_path):
    recipe = RECIPE.replace('loss = "poisson"', 'loss = "tweedie"\npower = 1.4')
    chain = fit_recipe(parse_recipe(textwrap.dedent(recipe), visits))
    chain.save(tmp_path / "v.chain")
    manifest = json.loads(members_of(tmp_path / "v.chain")["manifest.json"])
    assert (manifest["weight"], manifest["exposure"], manifest["power"]) == ("w", "coins", 1.4)
    fitted = stages.load(tmp_path / "v.chain")
    assert fitted.loss.power == 1.4 and fitted.exposure_column == "coins"
    frame = _visits()
    np.testing.assert_array_equal(fitted.predict(frame), chain.predict(frame))


@pytest.mark.parametrize(("key", "value", "words"), [
    ("power", 7.0, "power"), ("power", "1.5", "power"), ("exposure", ["x"] * 3, "exposure"),
    ("weight", 12, "weight"), ("exposure", "x" * 5000, "exposure"),
])
def test_a_hostile_weight_exposure_or_power_in_a_chain_file_is_refused(visits, tmp_path, key, value, words):
    chain = fit_recipe(read_recipe(visits / "visits.toml"))
    chain.save(tmp_path / "v.chain")
    members = members_of(tmp_path / "v.chain")
    manifest = json.loads(members["manifest.json"])
    manifest[key] = value
    members["manifest.json"] = json.dumps(manifest).encode()
    write_members(tmp_path / "bad.chain", members)
    with pytest.raises(ChainFileError, match=words):
        stages.load(tmp_path / "bad.chain")


def test_a_power_or_exposure_for_a_loss_that_takes_none_is_refused(visits, tmp_path):
    chain = fit_recipe(read_recipe(visits / "visits.toml"))
    chain.save(tmp_path / "v.chain")
    members = members_of(tmp_path / "v.chain")
    manifest = json.loads(members["manifest.json"])
    manifest["power"] = 1.5  # a poisson chain
    members["manifest.json"] = json.dumps(manifest).encode()
    write_members(tmp_path / "bad.chain", members)
    with pytest.raises(ChainFileError, match="manifest power 1.5 does not fit loss 'poisson'"):
        stages.load(tmp_path / "bad.chain")


def test_a_session_keeps_weight_and_exposure(visits, tmp_path):
    chain = fit_recipe(read_recipe(visits / "visits.toml"))
    path = save_session(chain, tmp_path / "v.session")
    restored = load_session(path, visits / "visits.csv")
    assert restored.weight_column == "w" and restored.exposure_column == "coins"
    np.testing.assert_array_equal(restored.outputs()[0], chain.outputs()[0])


def test_predict_needs_the_exposure_column_and_multiplies_by_exposure_on_request(visits, run):
    status, _, err = run("fit", "visits.toml", "--out", "v.chain")
    assert status == 0, err
    status, out, err = run("predict", "v.chain", "visits.csv", "--out", "rates.csv")
    assert status == 0, err
    status, out, err = run("predict", "v.chain", "visits.csv", "--exposure", "coins", "--out", "totals.csv")
    assert status == 0, err
    rates, totals = pd.read_csv("rates.csv"), pd.read_csv("totals.csv")
    np.testing.assert_allclose(totals["prediction"], rates["prediction"] * _visits()["coins"], rtol=1e-12)
    fitted = stages.load("v.chain")
    np.testing.assert_allclose(rates["prediction"], fitted.predict(_visits()), rtol=1e-12)
    _visits().drop(columns="coins").to_csv("no_exposure.csv", index=False)
    status, _, err = run("predict", "v.chain", "no_exposure.csv")
    assert status == 2
    assert err.startswith("error: no_exposure.csv: the chain was fit with exposure column 'coins', which is not a column")
    bad = _visits()
    bad.loc[6, "coins"] = 0.0
    bad.to_csv("bad_exposure.csv", index=False)
    status, _, err = run("predict", "v.chain", "bad_exposure.csv")
    assert status == 2 and "exposure column 'coins' must be a positive number; 1 row is not (first: row 7, 0)" in err


def test_each_stage_residual_of_a_count_chain_is_the_target_minus_the_expected_total(visits, run):
    assert run("fit", "visits.toml", "--out", "v.chain")[0] == 0
    status, _, err = run("predict", "v.chain", "visits.csv", "--each-stage", "--out", "stages.csv")
    assert status == 0, err
    written, frame = pd.read_csv("stages.csv"), _visits()
    np.testing.assert_allclose(written["residual"], frame["mdvis"] - written["prediction"] * frame["coins"], rtol=1e-9)


def test_show_prints_the_weight_exposure_and_power(visits, run):
    Path("tw.toml").write_text(textwrap.dedent(RECIPE).replace('loss = "poisson"', 'loss = "tweedie"\npower = 1.3'))
    assert run("fit", "tw.toml", "--out", "tw.chain")[0] == 0
    status, out, _ = run("show", "tw.chain")
    assert status == 0
    assert "tweedie (power 1.3)" in out and "'coins' (log(exposure)" in out and "'w' (row weights)" in out


def test_exposure_on_a_chain_not_on_the_log_link_is_a_usage_error(visits, run):
    text = textwrap.dedent(RECIPE).replace('loss = "poisson"', 'loss = "squared"').replace('exposure = "coins"\n', "")
    Path("sq.toml").write_text(text)
    assert run("fit", "sq.toml", "--out", "sq.chain")[0] == 0
    status, _, err = run("predict", "sq.chain", "visits.csv", "--exposure", "coins")
    assert status == 2 and "--exposure is for chains on the log link" in err


def test_remnant_export_of_a_count_chain_takes_the_exposure_and_gives_predicts_totals(visits, run):
    # the model's exposure input 'coins' multiplies exp(raw), as remnant predict --exposure coins does
    pytest.importorskip("onnxruntime")
    import onnxruntime

    assert run("fit", "visits.toml", "--out", "visits.chain")[0] == 0
    status, out, err = run("export", "visits.chain", "--onnx", "visits.onnx")
    assert status == 0, err
    assert "wrote visits.onnx (float64 throughout)" in out
    assert run("predict", "visits.chain", "visits.csv", "--exposure", "coins", "--out", "totals.csv")[0] == 0
    rows, totals = pd.read_csv(visits / "visits.csv"), pd.read_csv(visits / "totals.csv")["prediction"]
    session = onnxruntime.InferenceSession(str(visits / "visits.onnx"), providers=["CPUExecutionProvider"])
    inputs = {i.name: rows[i.name].to_numpy(np.float64) for i in session.get_inputs()}
    assert "coins" in inputs and "mdvis" not in inputs and "w" not in inputs
    (prediction,) = session.run(["prediction"], inputs)
    assert np.max(np.abs(prediction - totals) / np.maximum(np.abs(totals), 1.0)) <= 1e-9
