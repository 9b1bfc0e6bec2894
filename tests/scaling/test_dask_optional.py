"""The engine imports, fits and reads a chain file fit on a cluster without Dask installed; asking
for a cluster then says which extra to install."""

from __future__ import annotations

import subprocess
import sys

import pytest

BLOCK_DASK = """
import sys
class Blocker:
    def find_spec(self, name, path=None, target=None):
        if name.split('.')[0] in ('dask', 'distributed'):
            raise ImportError('blocked: ' + name, name=name)
sys.meta_path.insert(0, Blocker())
import numpy as np, pandas as pd
import stages, stages.bridges.cluster_chain
rng = np.random.RandomState(0)
frame = pd.DataFrame(rng.rand(400, 3), columns=['a', 'b', 'c'])
frame['y'] = frame['a'] * 2 + rng.rand(400)
chain = stages.Chain(frame, 'y')
chain.add('linear')
if len(sys.argv) > 1:
    print(float(stages.load(sys.argv[1]).predict(frame)[0]))
try:
    stages.Chain.from_dask(frame, 'y', client=None)
except stages.errors.RemnantError as exc:
    print(exc)
"""


def test_engine_and_cluster_modules_import_without_dask():
    done = subprocess.run([sys.executable, "-c", BLOCK_DASK], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert "pip install 'remnant[dask]'" in done.stdout


def test_a_chain_fit_on_a_cluster_loads_and_predicts_without_dask(tmp_path):
    pytest.importorskip("distributed")
    import dask.dataframe as dd
    import numpy as np
    import pandas as pd
    from distributed import Client, LocalCluster

    import stages

    rng = np.random.RandomState(0)
    frame = pd.DataFrame(rng.rand(400, 3), columns=["a", "b", "c"])
    frame["y"] = frame["a"] * 2 + rng.rand(400)
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster, \
            Client(cluster) as client:
        chain = stages.Chain.from_dask(dd.from_pandas(frame, npartitions=2), "y", client=client)
        chain.add("mean")
        chain.add("lightgbm", params={"n_estimators": 5})
        chain.save(tmp_path / "c.chain")
        expected = float(chain.predict(frame.head(1))[0])
    done = subprocess.run([sys.executable, "-c", BLOCK_DASK, str(tmp_path / "c.chain")], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert float(done.stdout.splitlines()[0]) == expected
