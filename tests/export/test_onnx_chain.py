"""The export of whole chains: the demo chains, the probe file, and what it refuses.

onnxruntime is the reference runtime; onnx's own reference evaluator (``onnx.reference``, written
from the operator specifications) checks the tree operator's reading of our node layout.
"""

from __future__ import annotations

import os
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from onnx_support import onnx_inputs, relative_gap, run_onnx

import stages
from stages.errors import ExportError
from tui.demo_app import demo_folder

DEMO = demo_folder()


def demo_rows() -> pd.DataFrame:
    """Return 400 demo rows with missing values added to every feature and a depot never seen."""
    frame = pd.read_csv(DEMO / "deliveries.csv").iloc[:400].copy()
    rng = np.random.RandomState(0)
    for column in ("distance_km", "load_kg", "outside_temp_c", "hour", "road_works", "door_open_min"):
        frame[column] = frame[column].astype(float)
        frame.loc[rng.choice(len(frame), 20, replace=False), column] = np.nan
    frame.loc[rng.choice(len(frame), 20, replace=False), "depot"] = "Harbourside"
    frame.loc[rng.choice(len(frame), 20, replace=False), "depot"] = None
    return frame


@pytest.fixture(scope="module")
def demo_chains(tmp_path_factory) -> dict[str, Path]:
    from stages.files.recipe import fit_recipe, read_recipe

    folder = tmp_path_factory.mktemp("demo")
    out = {}
    for name in ("deliveries", "deliveries_binary"):
        chain = fit_recipe(read_recipe(DEMO / f"{name}.toml"))
        chain.save(folder / f"{name}.chain")
        out[name] = folder / f"{name}.chain"
    return out


def quietly(function, *args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return function(*args)


def test_the_demo_chain_predicts_in_onnxruntime_as_it_does_in_python(demo_chains, tmp_path):
    fitted = stages.load(demo_chains["deliveries"])
    report = fitted.to_onnx(tmp_path / "demo.onnx")
    rows = demo_rows()
    got = run_onnx(tmp_path / "demo.onnx", rows, fitted.schema)["prediction"]
    want = quietly(fitted.predict, rows)
    assert report.precision == "float64" and [s.kind for s in report.stages] == ["linear", "tree", "lightgbm", "spline"]
    assert relative_gap(got, want, 28.0) <= 1e-9
    assert report.largest_difference <= 1e-9 * 100 and report.rows >= 64


def test_the_binary_demo_chain_gives_the_same_probabilities_and_classes(demo_chains, tmp_path):
    fitted = stages.load(demo_chains["deliveries_binary"])
    fitted.to_onnx(tmp_path / "risk.onnx")
    rows = demo_rows()
    out = run_onnx(tmp_path / "risk.onnx", rows, fitted.schema)
    assert np.max(np.abs(out["probability"] - quietly(fitted.predict_proba, rows)[:, 1])) <= 1e-9
    assert np.array_equal(out["prediction"], quietly(fitted.predict, rows))


def test_the_probe_file_holds_the_inputs_and_the_chains_own_outputs(demo_chains, tmp_path):
    fitted = stages.load(demo_chains["deliveries_binary"])
    report = fitted.to_onnx(tmp_path / "risk.onnx")
    assert report.probe_path == str(tmp_path / "risk.probe.csv")
    probe = pd.read_csv(report.probe_path, keep_default_na=False, na_values={})
    assert list(probe.columns) == [*fitted.schema.names, "prediction", "probability"] and len(probe) == report.rows
    features = probe[fitted.schema.names].replace("", np.nan)
    assert (features["depot"].isna().any() and (~features["depot"].isin([*fitted.schema.columns[0].levels, np.nan])).any())
    assert np.allclose(quietly(fitted.predict_proba, features)[:, 1], probe["probability"], rtol=0, atol=1e-15)
    # the deployment side's check, as the README shows it
    out = run_onnx(tmp_path / "risk.onnx", features, fitted.schema)
    assert np.max(np.abs(out["probability"] - probe["probability"])) <= 1e-9


def test_the_tree_operator_is_read_as_the_onnx_reference_evaluator_reads_it(train_frame, new_rows, tmp_path):
    from onnx.reference import ReferenceEvaluator

    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("forest", 1.0, params={"n_estimators": 5})
    chain.add("lightgbm", 0.5, params={"n_estimators": 10, "num_leaves": 7})
    fitted = chain.fitted()
    fitted.to_onnx(tmp_path / "trees.onnx")
    inputs = onnx_inputs(new_rows, fitted.schema)
    reference = ReferenceEvaluator(str(tmp_path / "trees.onnx")).run(["prediction"], inputs)[0]
    assert relative_gap(reference, quietly(fitted.predict, new_rows), 1.0) <= 1e-9


def test_a_stage_without_a_converter_is_an_error_naming_it_and_writes_nothing(train_frame, tmp_path):
    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("linear")
    chain.add("sklearn:sklearn.kernel_ridge.KernelRidge")
    with pytest.raises(ExportError, match=r"stage 2 .*KernelRidge.*no converter"):
        chain.fitted().to_onnx(tmp_path / "k.onnx")
    assert os.listdir(tmp_path) == []


def test_a_model_that_would_predict_differently_is_refused_and_nothing_is_written(train_frame, tmp_path, monkeypatch):
    from stages.bridges.onnx import compose

    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("linear")
    chain.add("tree", 0.5)
    (tmp_path / "m.onnx").write_bytes(b"the model the user had")
    original = compose.chain_graph

    def off_by_a_little(fitted, **kwargs):
        fitted.stages[1].learner.tree_.value[1:, 0, 0] += 1e-6  # the graph's leaves, not predict's
        try:
            return original(fitted, **kwargs)
        finally:
            fitted.stages[1].learner.tree_.value[1:, 0, 0] -= 1e-6

    monkeypatch.setattr(compose, "chain_graph", off_by_a_little)
    with pytest.raises(ExportError, match=r"differs from predict .* starting at stage 2 \(tree\); nothing was written"):
        chain.fitted().to_onnx(tmp_path / "m.onnx")
    assert (tmp_path / "m.onnx").read_bytes() == b"the model the user had"
    assert sorted(os.listdir(tmp_path)) == ["m.onnx"]


def test_a_missing_folder_is_a_clear_error(train_frame, tmp_path):
    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("linear")
    with pytest.raises(ExportError, match="folder .*nowhere.* does not exist"):
        chain.fitted().to_onnx(tmp_path / "nowhere" / "m.onnx")


def test_a_failed_write_leaves_the_old_files_and_no_temporary_file(train_frame, tmp_path, monkeypatch):
    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("linear")
    (tmp_path / "m.onnx").write_bytes(b"old model")
    (tmp_path / "m.probe.csv").write_bytes(b"old probe")
    real_replace = os.replace

    def fail_on_the_model(source, target):
        if str(target).endswith(".onnx"):
            raise OSError(28, "No space left on device")
        real_replace(source, target)

    monkeypatch.setattr(os, "replace", fail_on_the_model)
    with pytest.raises(ExportError, match="cannot write the ONNX model .*m.onnx.*disk is full"):
        chain.fitted().to_onnx(tmp_path / "m.onnx")
    assert (tmp_path / "m.onnx").read_bytes() == b"old model"
    assert not [name for name in os.listdir(tmp_path) if name.endswith(".tmp")]


def test_without_the_extra_the_error_names_it(train_frame, tmp_path, monkeypatch):
    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("linear")
    monkeypatch.setitem(sys.modules, "skl2onnx", None)  # import skl2onnx now raises ImportError
    with pytest.raises(ExportError, match=r"pip install 'remnant\[onnx\]' \(skl2onnx is not installed\)"):
        chain.fitted().to_onnx(tmp_path / "m.onnx")
    assert os.listdir(tmp_path) == []


def test_the_readme_scoring_example_runs_on_the_exported_demo_chain(demo_chains, tmp_path, monkeypatch, capsys):
    text = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    section = text.split("## Exporting to ONNX", 1)[1]
    example = section.split("```python", 1)[1].split("```", 1)[0]
    stages.load(demo_chains["deliveries"]).to_onnx(tmp_path / "deliveries.onnx")
    monkeypatch.chdir(tmp_path)
    exec(compile(example, "README.md", "exec"), {})
    assert float(capsys.readouterr().out) <= 1e-9 * 100  # predictions of tens of minutes


def test_rows_of_ones_own_are_checked_and_a_live_chain_without_them_says_so(train_frame, new_rows, tmp_path):
    chain = stages.Chain(train_frame, "y", stages.Holdout(fraction=0.25, seed=0), ignore=["hit"])
    chain.add("linear")
    chain.add("tree", 0.5)
    report = chain.fitted().to_onnx(tmp_path / "m.onnx", rows=new_rows)
    assert report.own_rows == len(new_rows) and report.rows > 2 * len(new_rows)
    assert not any(line.startswith("note:") for line in report.lines())
    bare = chain.fitted().to_onnx(tmp_path / "m.onnx")
    assert bare.own_rows == 0 and "pass rows=" in bare.lines()[-1]
