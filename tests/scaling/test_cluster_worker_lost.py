"""A worker lost during a LightGBM stage on a 3-worker cluster: the fit completes, or fails with a clear
message and the chain as it was (no stage, no score, no random draw changed); the next stage then
completes or fails at once with what to do, and once the workers are restarted it completes."""

from __future__ import annotations

import contextlib
import os
import threading
import time

import pytest

pytest.importorskip("distributed")

import dask.dataframe as dd  # noqa: E402
import pandas as pd  # noqa: E402
from sklearn.datasets import make_friedman1  # noqa: E402

import stages  # noqa: E402
from stages.bridges.cluster_rows import ClusterError  # noqa: E402
from stages.chain_state import same_stream  # noqa: E402
from stages.errors import StageFitError  # noqa: E402


def _training(client) -> bool:
    return any("_train_part" in str(key) for keys in client.processing().values() for key in keys)


def test_a_worker_lost_mid_stage_leaves_the_chain_whole(tmp_path):
    from distributed import Client, LocalCluster

    X, y = make_friedman1(n_samples=6000, n_features=5, noise=1.0, random_state=0)  # Friedman (1991), via scikit-learn
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(5)])
    frame["y"] = y
    with LocalCluster(n_workers=3, threads_per_worker=1, dashboard_address=":0", memory_limit=0) as cluster, \
            Client(cluster) as client:
        chain = stages.Chain.from_dask(dd.from_pandas(frame, npartitions=6), "y", client=client, sample_rows=1000)
        chain.add("mean")
        scores, stream = chain.scores(), chain.state().streams[0]
        outcome: dict[str, object] = {}

        def fit() -> None:
            try:
                chain.add("lightgbm", params={"n_estimators": 3000, "num_leaves": 31})
                outcome["done"] = True
            except StageFitError as exc:
                outcome["error"] = exc

        worker = threading.Thread(target=fit, daemon=True)
        worker.start()
        deadline = time.monotonic() + 120
        while not _training(client) and worker.is_alive() and time.monotonic() < deadline:
            time.sleep(0.05)
        time.sleep(1.0)  # the workers' LightGBM network is up: the loss falls mid-training
        victim = next(iter(client.scheduler_info()["workers"]))
        with contextlib.suppress(Exception):  # the worker goes away while answering
            client.run(os._exit, 1, workers=[victim])
        worker.join(timeout=300)  # only catches a hang
        assert not worker.is_alive(), "the fit hung after a worker was lost"
        if "error" in outcome:
            assert "stage 2 (lightgbm)" in str(outcome["error"])
            assert len(chain) == 1 and chain.scores() == scores
            assert same_stream(chain.state().streams[0], stream)
        else:
            assert outcome == {"done": True} and len(chain) == 2
        chain.save(tmp_path / "after.chain")
        assert len(stages.load(tmp_path / "after.chain").stages) == len(chain)
        # the next stage: done, or refused at once (the workers left may hold the lost stage's training)
        length = len(chain)
        try:
            chain.add("lightgbm", params={"n_estimators": 5, "num_leaves": 7})
        except ClusterError as exc:
            assert "restart them" in str(exc) and len(chain) == length
            held = list(client.scheduler_info()["workers"])
            client.restart_workers(held, timeout=120)
            client.wait_for_workers(len(held), timeout=120)
            chain.add("lightgbm", params={"n_estimators": 5, "num_leaves": 7})
        assert len(chain) == length + 1 and chain.scores()[-1].valid["rmse"] < chain.scores()[1].valid["rmse"]
