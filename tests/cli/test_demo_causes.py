"""The multiclass demo: the main cause of each delivery's delay (``tui/demo/delay_causes.csv``).

The data is our own invented scenario (``demo/make_data.py``): the shipped file is what the
generator writes, the deliveries' own file is unchanged by it, and the recipe's chain tells the
story of ``demo/README.md``: the multinomial logistic start takes most of the gain, tree stages
find the rush hours and the heavy loads on hot days that a line in each feature misses.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

from tui.demo_app import demo_folder

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def make_data():
    spec = importlib.util.spec_from_file_location("make_data", ROOT / "demo" / "make_data.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules["make_data"] = module
    spec.loader.exec_module(module)
    yield module
    sys.modules.pop("make_data", None)


def test_the_generator_writes_the_shipped_demo_files_byte_for_byte(make_data, tmp_path):
    deliveries, causes = tmp_path / "deliveries.csv", tmp_path / "delay_causes.csv"
    assert make_data.main(["--out", str(deliveries), "--causes-out", str(causes)]) == 0
    assert deliveries.read_bytes() == (demo_folder() / "deliveries.csv").read_bytes()
    assert causes.read_bytes() == (demo_folder() / "delay_causes.csv").read_bytes()


def test_the_delay_causes_are_the_deliveries_with_a_cause_of_five(make_data):
    causes = make_data.make_delay_causes(rows=4000, seed=7)
    deliveries = make_data.make_deliveries(rows=4000, seed=7)
    features = [c for c in deliveries.columns if c not in ("minutes_late", "cargo_out_of_band")]
    assert list(causes.columns) == [*features, "delay_cause"]
    assert causes[features].equals(deliveries[features])
    shares = causes["delay_cause"].value_counts(normalize=True)
    assert set(shares.index) == set(make_data.CAUSES) and shares.min() > 0.03
    # the story: heavy loads on hot days make a cooling stop the likeliest cause
    heat = make_data._heavy_in_heat(causes)
    hot = causes.loc[heat, "delay_cause"].value_counts(normalize=True)
    assert hot.idxmax() == "cooling_stop"


def test_the_multiclass_demo_recipe_tells_its_story(run):
    status, out, err = run("demo", "--multiclass", "--headless")
    assert status == 0, err
    rows = [line.split() for line in out.splitlines()[1:]]
    assert [r[1] for r in rows] == ["start", "logistic", *["tree"] * 5, "lightgbm"]
    valid = [float(r[4 if r[1] != "start" else 3]) for r in rows]
    assert valid[1] < valid[0] - 0.2           # the logistic start takes most of the gain
    assert valid[2] < valid[1] - 0.05          # the first tree finds what a line misses
    assert "'cooling_stop', 'none', 'road_works', 'rush_traffic', 'yard_queue'" in err
