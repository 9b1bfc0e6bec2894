"""Exact fits on every fitting row of a chain on a Dask cluster, against the in-memory chain.

The references are outside the cluster path: the in-memory ``stages.Chain`` on the same parts (a
split column from the same hash of the row labels), numpy's median, and scikit-learn's Ridge on
a design built here with numpy.
"""

from __future__ import annotations

import pytest

pytest.importorskip("distributed")
pytest.importorskip("dask.dataframe")

import dask.array as da  # noqa: E402
import dask.dataframe as dd  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from sklearn.datasets import make_friedman1  # noqa: E402
from sklearn.linear_model import Ridge  # noqa: E402

import stages  # noqa: E402
from stages.bridges.cluster_chain import ClusterChain  # noqa: E402
from stages.bridges.cluster_lstsq import exact_medians  # noqa: E402
from stages.bridges.cluster_rows import VALID, part_codes  # noqa: E402
from stages.errors import StageFitError, StageSpecError  # noqa: E402

FEATURES = [f"x{i}" for i in range(5)]
SEED, SPLIT_SEED, SAMPLE_ROWS = 4, 1, 900


@pytest.fixture(scope="module")
def friedman() -> pd.DataFrame:
    """Return Friedman #1 data (Friedman 1991, scikit-learn's make_friedman1), 2,400 rows, a seventh of
    x2 missing and x3 in steps, with the part of each row from the hash of its label."""
    X, y = make_friedman1(n_samples=2400, n_features=5, noise=1.0, random_state=0)
    X[::7, 2] = np.nan
    X[:, 3] = np.round(X[:, 3] * 8) - 4
    frame = pd.DataFrame(X, columns=FEATURES)
    frame["y"] = y
    frame["split"] = np.where(part_codes(frame.index.to_numpy(), 0.2, 0.0, SPLIT_SEED) == VALID, "valid", "train")
    return frame


@pytest.fixture(scope="module")
def client():
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster, \
            Client(cluster) as client:
        yield client


def cluster_chain(frame: pd.DataFrame, client, target: str = "y", loss: str | None = None) -> ClusterChain:
    ddf = dd.from_pandas(frame, npartitions=3)
    chain = stages.Chain.from_dask(ddf, target, stages.Holdout(0.2, seed=SPLIT_SEED), client, loss=loss,
                                   seed=SEED, features=FEATURES, sample_rows=SAMPLE_ROWS)
    assert isinstance(chain, ClusterChain)
    return chain


def memory_chain(frame: pd.DataFrame, target: str = "y", loss: str | None = None) -> stages.Chain:
    return stages.Chain(frame, target, stages.SplitColumn("split"), loss=loss, seed=SEED, features=FEATURES)


def test_exact_medians_are_numpys_whatever_the_chunks():
    values = np.random.RandomState(0).normal(size=(1001, 3))
    values[::5, 1] = np.nan
    values[:, 2] = np.round(values[:, 2])  # ties
    values[:4, 0] = [-0.0, 0.0, -1e-300, np.inf]
    for rows in (1001, 1000, 2, 1):
        medians, present = exact_medians(da.from_array(values[:rows], chunks=(137, 3)))
        columns = [c[~np.isnan(c)] for c in values[:rows].T]
        np.testing.assert_array_equal(medians, [np.median(c) if len(c) else 0.0 for c in columns])  # numpy's median
        np.testing.assert_array_equal(present, [len(c) for c in columns])


def test_ridge_on_every_fitting_row_is_the_in_memory_stage_and_scikit_learns(friedman, client):
    cluster, memory = cluster_chain(friedman, client), memory_chain(friedman)
    for chain in (cluster, memory):
        chain.add("ridge", params={"alpha": 40.0})
        chain.add("ridge", params={"alpha": 0.5, "fit_intercept": False})
    np.testing.assert_allclose(cluster.predict(friedman), memory.predict(friedman), rtol=1e-8)
    for ours, theirs in zip(cluster.scores(), memory.scores(), strict=True):
        for part in ("train", "valid"):
            assert getattr(ours, part)["rmse"] == pytest.approx(getattr(theirs, part)["rmse"], rel=1e-8)
    assert list(cluster.table()["fit_on"])[1:] == ["every fitting row"] * 2
    # scikit-learn's Ridge on the design built here: the median fill, the population standard
    # deviation, a 0/1 column after x2 for its missing values
    train = friedman[friedman["split"] == "train"]
    X = train[FEATURES].to_numpy()
    filled = np.where(np.isnan(X), np.nanmedian(X, axis=0), X)
    design = np.c_[(filled - filled.mean(axis=0)) / filled.std(axis=0), np.isnan(X[:, 2])]
    start = train["y"].mean()
    reference = Ridge(alpha=40.0).fit(design, train["y"] - start)
    np.testing.assert_allclose(cluster.stages[0].learners[0].predict(X), reference.predict(design), rtol=1e-8)


def test_ridge_with_an_iterative_solver_is_refused_on_a_cluster(friedman, client):
    chain = cluster_chain(friedman, client)
    with pytest.raises((StageSpecError, StageFitError), match="solver 'sag' is not served on a cluster"):
        chain.add("ridge", params={"solver": "sag"})
    assert len(chain) == 0
