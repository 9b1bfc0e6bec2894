"""``remnant fit --cluster`` and ``remnant predict --cluster``, the recipe's [cluster] table, and the
clear error without Dask. The data is scikit-learn's diabetes data (Efron et al. 2004) as Parquet parts."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes

import stages
from stages.errors import RecipeError
from stages.files.recipe import parse_recipe, recipe_to_toml

RECIPE = """
[data]
path = "parts"
target = "target"

[chain]
seed = 2

[validation]
fraction = 0.25

[cluster]
sample_rows = 300
partition_rows = 1000

[[stage]]
kind = "linear"

[[stage]]
kind = "hist_tree"
params = { max_depth = 2 }

[[stage]]
kind = "tree"
params = { max_depth = 2 }
"""


@pytest.fixture
def parts(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> pd.DataFrame:
    """Write the diabetes data as three Parquet parts in ``parts/`` and the recipe; return the frame."""
    frame = load_diabetes(as_frame=True).frame
    (tmp_path / "parts").mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_parquet(tmp_path / "parts" / f"part{i}.parquet", index=False)
    (tmp_path / "cluster.toml").write_text(RECIPE)
    monkeypatch.chdir(tmp_path)
    return frame


def test_fit_and_predict_on_a_local_cluster(parts, run, tmp_path):
    pytest.importorskip("distributed")
    status, out, err = run("fit", "cluster.toml", "--cluster", "local:1", "--out", "c.chain")
    assert status == 0, err
    assert "fit on a sample of" in err and "hist_tree" in out
    fitted = stages.load("c.chain")  # an ordinary chain file
    assert [s.kind for s in fitted.stages] == ["linear", "hist_tree", "tree"]
    status, _, err = run("predict", "c.chain", "parts/*.parquet", "--cluster", "local:1", "--out", "scores")
    assert status == 0, err
    written = pd.read_parquet(tmp_path / "scores").sort_values("row_id")
    np.testing.assert_array_equal(written["row_id"], np.arange(len(parts)))  # the row's place in the data
    np.testing.assert_allclose(written["prediction"], fitted.predict(parts), rtol=1e-12)
    # an existing folder is never replaced
    status, _, err = run("predict", "c.chain", "parts", "--cluster", "local:1", "--out", "scores")
    assert status == 2 and "exists" in err
    assert sorted(os.listdir(tmp_path / "scores")) == [f"part.{i}.parquet" for i in range(3)]


def test_lightgbm_network_lines_stay_off_the_terminal(parts, capfd, tmp_path):
    # the workers of local:2 are processes writing to this terminal's descriptors, which capfd holds;
    # the three parts stay three partitions, so both workers train and LightGBM starts its network
    pytest.importorskip("distributed")
    import tui.cli

    (tmp_path / "three.toml").write_text(RECIPE.replace("partition_rows = 1000\n", ""))
    status = tui.cli.main(["fit", "three.toml", "--cluster", "local:2", "--out", "c.chain"])
    out, err = capfd.readouterr()
    assert status == 0, err
    assert "hist_tree" in out and "saved c.chain (3 stages)" in err
    for line in ("[LightGBM]", "Trying to bind port", "Connected to rank", "Listening..."):
        assert line not in out and line not in err


@pytest.mark.parametrize(("table", "message"), [
    ('address = "udp://x:1"', "address must be 'local:N' or 'tcp://host:port'"),
    ('address = "local:0"', "a local cluster has 1 to 64 workers"),
    ('address = 7', "address must be"),
    ("partition_rows = 10", "partition_rows must be at least 1000"),
    ("sample_rows = 100000000", "sample_rows must be at most 2,000,000"),
    ("workers = 3", "unknown key 'workers' in [cluster]"),
])
def test_bad_cluster_tables_name_the_line(table, message):
    text = RECIPE.replace("sample_rows = 300\npartition_rows = 1000", table)
    with pytest.raises(RecipeError, match=r"line \d+: .*" + re.escape(message)):
        parse_recipe(text)


def test_cluster_table_round_trips():
    recipe = parse_recipe(RECIPE.replace("[cluster]", '[cluster]\naddress = "tcp://10.0.0.5:8786"'))
    assert recipe.cluster is not None and recipe.cluster.address == "tcp://10.0.0.5:8786"
    again = parse_recipe(recipe_to_toml(recipe))
    assert again.cluster == recipe.cluster


BLOCKED = """
import sys
class Blocker:
    def find_spec(self, name, path=None, target=None):
        if name.split('.')[0] in ('dask', 'distributed'):
            raise ImportError('blocked: ' + name, name=name)
sys.meta_path.insert(0, Blocker())
import tui.cli
sys.exit(tui.cli.main(sys.argv[1:]))
"""


def test_cluster_without_dask_names_the_extra(parts, tmp_path):
    done = subprocess.run([sys.executable, "-c", BLOCKED, "fit", "cluster.toml", "--cluster", "local:2", "--out",
                           "c.chain"], capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith("error: ") and "pip install 'remnant[dask]'" in done.stderr
    assert "Traceback" not in done.stderr and not (tmp_path / "c.chain").exists()


def test_cluster_data_paths(parts, tmp_path):
    pytest.importorskip("dask.dataframe")
    from stages.bridges.cluster_data import read_cluster_data

    for i in range(2):
        parts.iloc[i * 200:(i + 1) * 200].to_csv(tmp_path / f"rows{i}.csv", index=False)
    assert len(read_cluster_data("rows*.csv")) == 400  # a CSV glob
    assert len(read_cluster_data("parts")) == len(parts)  # a folder of Parquet files
    assert len(read_cluster_data("parts/part1.parquet")) == len(parts.iloc[np.array_split(np.arange(len(parts)), 3)[1]])
    with pytest.raises(RecipeError, match="nothing.csv: no such file"):
        read_cluster_data("nothing.csv")
    (tmp_path / "notes.txt").write_text("x")
    with pytest.raises(RecipeError, match="a cluster reads Parquet files"):
        read_cluster_data("notes.txt")
