"""The engine imports and fits without Dask installed; only the Dask functions need it."""

from __future__ import annotations

import subprocess
import sys

BLOCK_DASK = """
import sys
class Blocker:
    def find_spec(self, name, path=None, target=None):
        if name.split('.')[0] in ('dask', 'distributed'):
            raise ImportError('blocked: ' + name)
sys.meta_path.insert(0, Blocker())
import numpy as np, pandas as pd
import stages, stages.bridges.dask_chain
from stages.bridges.dask_chain import ChainSettings, fit_in_memory
rng = np.random.RandomState(0)
frame = pd.DataFrame(rng.rand(400, 3), columns=['a', 'b', 'c'])
frame['y'] = frame['a'] * 2 + rng.rand(400)
fit = fit_in_memory(frame, ChainSettings('y', ['a', 'b', 'c'], params={'n_estimators': 5}))
assert fit.scores['valid'] > 0
try:
    stages.bridges.dask_chain.local_cluster_score(frame, ChainSettings('y', ['a', 'b', 'c']))
except ImportError:
    print('ok')
"""


def test_engine_and_dask_module_import_without_dask():
    done = subprocess.run([sys.executable, "-c", BLOCK_DASK], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "ok"
