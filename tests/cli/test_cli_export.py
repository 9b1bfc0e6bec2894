"""``remnant export CHAIN --onnx OUT.onnx``: the model, its probe file, the report, and bad inputs."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("onnxruntime")


def test_export_writes_the_model_and_its_probe_file_and_reports_the_difference(fitted_files, work, run):
    import onnxruntime

    status, out, err = run("export", fitted_files["binary"], "--onnx", "cancer.onnx")
    assert status == 0, err
    assert "wrote cancer.onnx (float64 throughout)" in out and "probe file: cancer.probe.csv" in out
    assert "largest difference" in out and "caution:" in err
    probe = pd.read_csv(work / "cancer.probe.csv")
    session = onnxruntime.InferenceSession(str(work / "cancer.onnx"), providers=["CPUExecutionProvider"])
    inputs = {i.name: probe[i.name].to_numpy(dtype=np.float64) for i in session.get_inputs()}
    prediction, probability = session.run(["prediction", "probability"], inputs)
    assert np.max(np.abs(probability - probe["probability"].to_numpy())) <= 1e-9
    assert np.array_equal(prediction, probe["prediction"].to_numpy())


@pytest.mark.parametrize(("target", "message"), [
    ("missing/m.onnx", "missing' does not exist"),
    (".", "it is a folder, not a regular file"),
    ("diabetes.chain", "is the chain file"),
    ("-", "needs a file name"),
])
def test_a_bad_output_is_one_error_line_with_status_2_and_nothing_written(fitted_files, work, run, target, message):
    before = sorted(p.name for p in work.iterdir())
    status, out, err = run("export", fitted_files["regression"], "--onnx", target)
    assert status == 2 and err.startswith("error: ") and message in err and err.count("\n") == 1
    assert sorted(p.name for p in work.iterdir()) == before


def test_a_chain_file_that_is_not_one_is_refused(work, run):
    (work / "not.chain").write_text("hello")
    status, _, err = run("export", "not.chain", "--onnx", "m.onnx")
    assert status == 2 and err.startswith("error: ") and not (work / "m.onnx").exists()
