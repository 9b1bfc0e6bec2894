"""Helpers of the session tests: building small chains and comparing chain states bit for bit."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

import stages
from stages.checkpoints import RebuiltOutputs
from stages.files.session import load_session, save_session

#: every kind cheap enough to fit in milliseconds on 200 rows, with small parameters
CHEAP_KINDS = [
    ("linear", 1.0, {}), ("ridge", 0.5, {}), ("lasso", 0.5, {}), ("tree", 0.5, {"max_depth": 2}),
    ("forest", 0.5, {"n_estimators": 3, "max_depth": 3}), ("extra_trees", 0.5, {"n_estimators": 3}),
    ("lightgbm", 0.5, {"n_estimators": 3, "num_leaves": 4, "n_jobs": 1}), ("hist_tree", 0.5, {"max_depth": 2}),
    ("knn", 0.3, {}), ("spline", 0.5, {}), ("mean", 0.5, {}), ("sklearn:sklearn.svm.SVR", 0.3, {}),
    ("tree", 0.5, {"max_depth": 2, "subsample": 0.7}),
]


def build(path, validation=None, kinds=CHEAP_KINDS, **kwargs) -> stages.Chain:
    """Return a chain on the CSV at ``path`` (target ``target``) with one stage per (kind, shrinkage, params)."""
    chain = stages.Chain.from_file(path, "target", validation or stages.Holdout(fraction=0.25, seed=3), **kwargs)
    for kind, shrinkage, params in kinds:
        chain.add(kind, shrinkage, params=params)
    return chain


# ----------------------------------------------------------------------------- exact equality
def stage_state(stage) -> dict:
    """Return everything a fitted stage holds besides its learners."""
    return {"spec": stage.spec, "params": stage.params, "features": stage.feature_index, "scales": stage.scales,
            "outputs": stage.outputs, "seconds": stage.fit_seconds, "before": stage.rng_before,
            "after": stage.rng_after, "step_rule": stage.step_rule, "oob_loss": stage.oob_loss,
            "notes": stage.notes}


def chain_state(chain: stages.Chain) -> dict:
    """Return everything that makes up a chain's state, removal stack and random streams included."""
    return {
        "stages": [stage_state(s) for s in chain.stages],
        "scores": [s.to_dict() for s in chain.scores()],
        "streams": list(chain.state().streams),
        "removals": [(r.action, [stage_state(s) for s in r.stages], [s.to_dict() for s in r.scores])
                     for r in chain.state().removals],
        "table": chain.table(),
        "test": (chain.test_revealed, chain.reveal_count),
        "settings": chain.describe(), "schema": chain.schema, "notes": chain.notes, "starts": chain.starts,
    }


def refit_state(chain: stages.Chain) -> dict:
    """Return the chain's state without fit times: what a refit of the same stages must reproduce."""
    state = chain_state(chain)
    for stage in [*state["stages"], *(s for r in state["removals"] for s in r[1])]:
        stage.pop("seconds")
    state["table"] = state["table"].drop(columns="seconds")
    return state


def assert_identical(a, b, where="chain") -> None:
    """Assert ``a`` and ``b`` are equal bit for bit (arrays exactly, NaN equal to NaN); outputs kept or
    rebuilt (``stages.checkpoints``) compare by their values."""
    a, b = (tuple(x) if isinstance(x, RebuiltOutputs) else x for x in (a, b))
    if isinstance(a, pd.DataFrame):
        pd.testing.assert_frame_equal(a, b, check_exact=True)
    elif isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), where
    elif isinstance(a, dict):
        assert a.keys() == b.keys(), where
        for key in a:
            assert_identical(a[key], b[key], f"{where}.{key}")
    elif isinstance(a, list | tuple):
        assert type(a) is type(b) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            assert_identical(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and np.isnan(a):
        assert isinstance(b, float) and np.isnan(b), where
    else:
        assert a == b, where


def round_trip(chain: stages.Chain) -> stages.Chain:
    """Return the chain saved as a session and loaded back (any warning on the way is an error)."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a restored stage predicting differently would warn
        return load_session(save_session(chain))
