"""The vehicle-month demo: temperature alarms per month in service, a poisson glm and trees on it.

The data is the demo's own invented scenario (demo/make_data.py --vehicle-months), shipped as
package data with its recipe.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd

import stages
from stages.files.recipe import fit_recipe
from tui.demo_app import demo_folder

ROOT = Path(__file__).resolve().parents[2]


def _make_data():
    spec = importlib.util.spec_from_file_location("make_data", ROOT / "demo" / "make_data.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_shipped_vehicle_months_are_what_make_data_writes(tmp_path):
    module = _make_data()
    assert module.main(["--vehicle-months", "--out", str(tmp_path / "v.csv")]) == 0
    assert (tmp_path / "v.csv").read_bytes() == (demo_folder() / "vehicle_months.csv").read_bytes()


def test_the_alarm_recipe_starts_with_a_poisson_glm_and_trees_improve_on_it():
    chain = fit_recipe(demo_folder() / "vehicle_alarms.toml")
    assert chain.loss.name == "poisson" and chain.exposure_column == "months_in_service"
    assert chain.stages[0].kind == "glm"
    deviance = [s.valid["deviance"] for s in chain.scores()]
    assert deviance[1] < 0.85 * deviance[0]          # the GLM takes the log-linear trend
    assert min(deviance[2:]) < deviance[1] - 0.02    # trees find the hot FrostLine months on top of it
    frame = pd.read_csv(demo_folder() / "vehicle_months.csv")
    per_month = chain.predict(frame)
    totals = chain.fitted().predict(frame, exposure="months_in_service")
    np.testing.assert_allclose(totals, per_month * frame["months_in_service"], rtol=1e-12)
    assert isinstance(chain, stages.Chain)
