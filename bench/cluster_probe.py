"""Figures per stage of a chain fit on a Dask cluster, for ``bench/cluster.py`` (measurement only).

``install()`` wraps the cluster path's steps so that each prints one ``PROBE {json}`` line:

- ``rows``: reading and persisting the rows on the workers (``build_rows``), ``sample``: pulling the
  sample here, ``bins``: the bin edges from the sample, ``start``: the start value, ``score``: the
  scores of a stage (one reduction);
- ``stage``: a whole stage fit (``fit_cluster_stage``): its wall time here, the seconds the workers
  spent computing its tasks (from Dask's task stream), and the bytes the workers sent (to each other
  and to this process; LightGBM's own sockets are not counted); for a ``lightgbm`` stage also the
  seconds inside LightGBM's training tasks (``_train_part``) and the time from the start of the
  fit to the first of them (moving the parts, finding ports: the network setup);
- ``tsqr``: the TSQR reduction of a ``linear`` stage (``factor.compute()``);
- ``workers``: each worker's peak resident size after the stage.

Nothing here changes a result: the wrappers call the originals.
"""

from __future__ import annotations

import functools
import json
import resource
import time
from typing import Any


def _say(**figures: Any) -> None:
    print("PROBE " + json.dumps(figures), flush=True)


def _worker_bytes(client: Any) -> tuple[int, int]:
    """Return the bytes the workers have sent in all, and received from each other, so far."""

    def sent_received(dask_worker: Any) -> tuple[int, int]:
        received = sum(int(e["total"]) for e in dask_worker.transfer_incoming_log)
        return int(dask_worker.transfer_outgoing_bytes_total), received

    per = client.run(sent_received)
    return sum(v[0] for v in per.values()), sum(v[1] for v in per.values())


def _worker_peaks(client: Any) -> list[float]:
    def peak() -> float:
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024 / 2**30

    return [round(v, 3) for v in client.run(peak).values()]


def _timed(name: str, fn: Any) -> Any:
    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        started = time.perf_counter()
        out = fn(*args, **kwargs)
        _say(step=name, seconds=round(time.perf_counter() - started, 3))
        return out

    return wrapper


def install() -> None:
    """Wrap the cluster path's steps to print their figures (see the module's docstring)."""
    import distributed
    import lightgbm.dask

    from stages.bridges import cluster_chain, cluster_rows

    cluster_chain.build_rows = _timed("rows", cluster_chain.build_rows)
    cluster_rows.ClusterRows.sample = _timed("sample", cluster_rows.ClusterRows.sample)
    cluster_chain.bin_edges = _timed("bins", cluster_chain.bin_edges)
    cluster_chain.ClusterChain._score = _timed("score", cluster_chain.ClusterChain._score)

    fit_started: list[float] = []
    original_fit = lightgbm.dask.DaskLGBMRegressor.fit

    @functools.wraps(original_fit)
    def lgbm_fit(self: Any, *args: Any, **kwargs: Any) -> Any:
        fit_started.append(time.time())
        return original_fit(self, *args, **kwargs)

    lightgbm.dask.DaskLGBMRegressor.fit = lgbm_fit

    import dask.array.linalg

    tsqr = dask.array.linalg.tsqr

    @functools.wraps(tsqr)
    def timed_tsqr(*args: Any, **kwargs: Any) -> Any:
        q, r = tsqr(*args, **kwargs)
        original_compute = r.compute

        def compute(*a: Any, **k: Any) -> Any:
            started = time.perf_counter()
            out = original_compute(*a, **k)
            _say(step="tsqr", seconds=round(time.perf_counter() - started, 3))
            return out

        r.compute = compute  # type: ignore[method-assign]
        return q, r

    dask.array.linalg.tsqr = timed_tsqr

    stage_fit = cluster_chain.fit_cluster_stage

    @functools.wraps(stage_fit)
    def fit_stage(ctx: Any, spec: Any, previous: Any, **kwargs: Any) -> Any:
        client = ctx.client
        sent0, received0 = _worker_bytes(client)
        fit_started.clear()
        started = time.perf_counter()
        with distributed.get_task_stream(client=client) as stream:
            stage = stage_fit(ctx, spec, previous, **kwargs)
        seconds = time.perf_counter() - started
        sent1, received1 = _worker_bytes(client)
        records = stream.data
        compute = 0.0
        train, first_train = 0.0, None
        for record in records:
            for ss in record.get("startstops", ()):
                if ss["action"] == "compute":
                    compute += ss["stop"] - ss["start"]
                    if str(record.get("key", "")).find("_train_part") >= 0 or \
                            "_train_part" in str(record.get("name", "")):
                        train += ss["stop"] - ss["start"]
                        first_train = ss["start"] if first_train is None else min(first_train, ss["start"])
        figures: dict[str, Any] = {
            "step": "stage", "kind": spec.kind, "seconds": round(seconds, 3),
            "worker_compute_seconds": round(compute, 3), "tasks": len(records),
            "bytes_between_workers": received1 - received0,
            "bytes_to_this_process": (sent1 - sent0) - (received1 - received0),
            "worker_peak_gib": _worker_peaks(client),
        }
        if fit_started and first_train is not None:
            figures.update(lightgbm_train_seconds=round(train, 3),
                           lightgbm_setup_seconds=round(first_train - fit_started[0], 3))
        _say(**figures)
        return stage

    cluster_chain.fit_cluster_stage = fit_stage
