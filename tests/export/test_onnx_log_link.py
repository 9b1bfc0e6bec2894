"""The ONNX export of chains on the log link (poisson, gamma, tweedie): ``prediction`` is exp of the raw
score, the mean per unit of exposure, and with the chain's exposure column as an input, that mean
times it, equal in onnxruntime to the chain's own ``predict(frame, exposure=column)`` to 1e-9.

Data: scikit-learn's diabetes data (Efron et al., 2004; 442 rows, 10 features); its target, a
disease-progression score from 25 to 346 in whole numbers, serves as the count or positive amount.
The exposure column (1 to 4 per row) is made up: it only has to enter the raw score as log(exposure).
"""

from __future__ import annotations

import numpy as np
import onnx
import onnxruntime
import pandas as pd
import pytest
from onnx_support import onnx_inputs, relative_gap
from sklearn.datasets import load_diabetes

import stages
from stages.errors import ExportError

pytestmark = pytest.mark.filterwarnings("ignore::stages.predictor.UnseenMissingWarning")  # the rows' gaps, on purpose


@pytest.fixture(scope="module")
def diabetes() -> pd.DataFrame:
    frame = load_diabetes(as_frame=True, scaled=False).frame.rename(columns={"target": "progression"})
    frame["years"] = 1.0 + np.arange(len(frame)) % 4
    return frame


@pytest.fixture(scope="module")
def new_rows(diabetes) -> pd.DataFrame:
    """Return 50 rows of the features with values missing, and exposures none of the fitting rows had."""
    rng = np.random.RandomState(5)
    rows = diabetes.drop(columns="progression").sample(50, random_state=2).reset_index(drop=True)
    for column in ("bmi", "s5"):
        rows.loc[rng.choice(len(rows), 5, replace=False), column] = np.nan
    rows["years"] = rng.uniform(0.1, 20.0, size=len(rows))
    return rows


def run(path, rows: pd.DataFrame, schema, exposure: str | None) -> np.ndarray:
    session = onnxruntime.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    inputs = onnx_inputs(rows, schema)
    if exposure:
        inputs[exposure] = rows[exposure].to_numpy(np.float64)
    (prediction,) = session.run(["prediction"], inputs)
    return prediction


STAGES = [("glm", 1.0, {}), ("lightgbm", 0.5, {"n_estimators": 20, "num_leaves": 7}),
          ("hist_tree", 0.5, {"max_depth": 3}), ("tree", 0.5, {"max_depth": 3}), ("spline", 0.5, {"n_knots": 4})]


@pytest.mark.parametrize(("loss", "power"), [("poisson", None), ("gamma", None), ("tweedie", 1.4)])
def test_a_log_link_chain_with_exposure_gives_predict_with_exposure_to_1e_9(loss, power, diabetes, new_rows, tmp_path):
    chain = stages.Chain(diabetes, "progression", stages.Holdout(fraction=0.25, seed=0), loss=loss, power=power,
                         exposure="years", seed=0)
    for kind, shrinkage, params in STAGES:
        chain.add(kind, shrinkage, params=params)
    fitted = chain.fitted()
    report = fitted.to_onnx(tmp_path / "c.onnx", rows=new_rows)
    assert report.precision == "float64" and report.share_of_tolerance <= 1.0
    model = onnx.load(str(tmp_path / "c.onnx"))
    assert "years" in [i.name for i in model.graph.input]
    assert {p.key: p.value for p in model.metadata_props}["remnant_exposure"] == "years"
    got = run(tmp_path / "c.onnx", new_rows, fitted.schema, "years")
    want = fitted.predict(new_rows, exposure="years")
    assert relative_gap(got, want, float(diabetes["progression"].std())) <= 1e-9
    # the probe file feeds the exposure too, beside the chain's own totals
    probe = pd.read_csv(tmp_path / "c.probe.csv")
    assert "years" in probe.columns and probe["years"].nunique() > 1


def test_without_an_exposure_column_the_model_gives_the_mean_per_unit(diabetes, new_rows, tmp_path):
    frame = diabetes.drop(columns="years")
    chain = stages.Chain(frame, "progression", stages.Holdout(fraction=0.25, seed=0), loss="poisson", seed=0)
    chain.add("glm")
    chain.add("lightgbm", 0.5, params={"n_estimators": 10, "num_leaves": 5})
    fitted = chain.fitted()
    fitted.to_onnx(tmp_path / "c.onnx", rows=new_rows)
    model = onnx.load(str(tmp_path / "c.onnx"))
    assert [i.name for i in model.graph.input] == list(fitted.schema.names)
    got = run(tmp_path / "c.onnx", new_rows, fitted.schema, None)
    # the reference: the mean per unit is exp of the raw score (the log link)
    assert relative_gap(got, np.exp(fitted.predict_raw(new_rows)), 1.0) <= 1e-9
    assert relative_gap(got, fitted.predict(new_rows), 1.0) <= 1e-9


def test_an_exposure_named_as_an_output_is_refused(diabetes, tmp_path):
    frame = diabetes.rename(columns={"years": "prediction"})
    chain = stages.Chain(frame, "progression", stages.Holdout(fraction=0.25, seed=0), loss="poisson",
                         exposure="prediction", seed=0)
    chain.add("glm")
    with pytest.raises(ExportError, match="exposure column 'prediction' has the name of"):
        chain.fitted().to_onnx(tmp_path / "c.onnx")
    assert not list(tmp_path.iterdir())
