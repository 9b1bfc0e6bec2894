"""Reaching a Dask cluster and its data: the client of an address, and a Dask frame over data files."""

from __future__ import annotations

import contextlib
import glob
import math
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from ..cluster_address import check_address, local_workers
from ..errors import RecipeError


@contextlib.contextmanager
def cluster_client(address: str) -> Iterator[Any]:
    """Yield a ``distributed.Client`` of the scheduler at ``address``, or of a LocalCluster of N worker
    processes started for ``local:N`` (and closed after); raise ClusterError when Dask is missing or
    the scheduler cannot be reached."""
    from .cluster_rows import ClusterError, require_dask

    require_dask()
    check_address(address)
    from distributed import Client, LocalCluster

    workers = local_workers(address)
    if workers is not None:
        with LocalCluster(n_workers=workers, threads_per_worker=1, dashboard_address=":0",
                          memory_limit=0) as cluster, Client(cluster) as client:
            from .cluster_lightgbm_log import quiet_local_workers

            quiet_local_workers(client)  # LightGBM's network chatter would reach this terminal
            yield client
        return
    try:
        client = Client(address, timeout=30)
    except (OSError, TimeoutError) as exc:
        raise ClusterError(f"cannot reach the Dask scheduler at {address} ({exc})") from None
    with client:
        yield client


def read_cluster_data(path: str | os.PathLike, partition_rows: int | None = None) -> Any:
    """Return a Dask DataFrame over a Parquet file, a folder of Parquet files, or a glob of Parquet or
    CSV files (nothing is read here but the files' schema); raise RecipeError naming the path when
    it matches nothing or is of another type."""
    import dask.dataframe as dd

    text = os.fspath(path)
    matches = sorted(glob.glob(text)) if glob.has_magic(text) else ([text] if os.path.exists(text) else [])
    if not matches:
        raise RecipeError(f"{text}: no such file, folder or matching files")
    suffixes = {Path(m).suffix.lower() for m in matches if not os.path.isdir(m)}
    if suffixes <= {".parquet", ".pq"} and (suffixes or os.path.isdir(matches[0])):
        frame = dd.read_parquet(matches if len(matches) > 1 else matches[0])
    elif suffixes == {".csv"}:
        frame = dd.read_csv(matches)
    else:
        raise RecipeError(f"{text}: a cluster reads Parquet files, a folder of them, or CSV files "
                          f"(found {', '.join(sorted(suffixes)) or 'a folder of other files'})")
    if partition_rows is not None:
        rows = int(frame.map_partitions(len).sum().compute())
        frame = frame.repartition(npartitions=max(1, math.ceil(rows / partition_rows)))
    return frame
