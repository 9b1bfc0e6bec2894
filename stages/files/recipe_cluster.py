"""The ``[cluster]`` table of a recipe, and fitting a recipe on a Dask cluster.

    [cluster]
    address = "local:2"          # or "tcp://scheduler:8786"
    partition_rows = 1_000_000   # optional: rows per partition
    sample_rows = 200_000        # optional: the sample pulled here for kinds with no distributed learner

``local:N`` starts a ``distributed.LocalCluster`` of N worker processes for the run. The data path
may be a Parquet file, a folder of Parquet files, or a glob of Parquet or CSV files; it is read
with ``dask.dataframe`` on the workers, never pulled here.
"""

from __future__ import annotations

import contextlib
import glob
import math
import os
import re
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import RecipeError, StageSpecError, ValidationSpecError
from ..kinds.base import ProgressFn
from ..parsing import shown, text_value, whole_value

if TYPE_CHECKING:
    from ..bridges.cluster_chain import ClusterChain
    from .recipe import Recipe

CLUSTER_KEYS = ("address", "partition_rows", "sample_rows")
#: limits on what a recipe may ask of a cluster (the sample is held on this machine)
MAX_ADDRESS = 255
MAX_LOCAL_WORKERS = 64
MIN_PARTITION_ROWS, MAX_PARTITION_ROWS = 1_000, 100_000_000
MIN_SAMPLE_ROWS, MAX_SAMPLE_ROWS = 100, 2_000_000
DEFAULT_SAMPLE_ROWS = 200_000
_REMOTE = re.compile(r"(tcp|tls)://[A-Za-z0-9.\-\[\]:]+:[0-9]{1,5}")
_LOCAL = re.compile(r"local:([0-9]{1,3})")


@dataclass(frozen=True)
class ClusterSettings:
    """A recipe's ``[cluster]`` table: the scheduler ``address`` (or ``local:N``; None to take it from
    the command line), the rows per partition (None: as the files are) and the sample size."""

    address: str | None = None
    partition_rows: int | None = None
    sample_rows: int = DEFAULT_SAMPLE_ROWS

    def to_dict(self) -> dict[str, Any]:
        """Return the table's keys that are set."""
        out: dict[str, Any] = {"address": self.address, "partition_rows": self.partition_rows,
                               "sample_rows": self.sample_rows}
        return {k: v for k, v in out.items() if v is not None}


def check_address(address: Any) -> str:
    """Return ``address`` when it is ``local:N`` (1 to MAX_LOCAL_WORKERS workers) or ``tcp://host:port``
    (or ``tls://``); raise StageSpecError naming the value otherwise."""
    if not isinstance(address, str) or len(address) > MAX_ADDRESS:
        raise StageSpecError(f"address must be 'local:N' or 'tcp://host:port', not {shown(address)}", key="address")
    local = _LOCAL.fullmatch(address)
    if local and 1 <= int(local.group(1)) <= MAX_LOCAL_WORKERS:
        return address
    if local:
        raise StageSpecError(f"address {address!r}: a local cluster has 1 to {MAX_LOCAL_WORKERS} workers",
                             key="address")
    if not _REMOTE.fullmatch(address):
        raise StageSpecError(f"address must be 'local:N' or 'tcp://host:port', not {address!r}", key="address")
    return address


def parse_cluster(table: Any, fail: Callable[[str, str | None], RecipeError]) -> ClusterSettings | None:
    """Return the settings of a ``[cluster]`` table (None when the recipe has none); ``fail(problem, key)``
    makes the RecipeError that names the recipe line."""
    if table is None:
        return None
    if not isinstance(table, dict):
        raise fail(f"[cluster] must be a table, not {shown(table)}", None)
    unknown = [k for k in table if k not in CLUSTER_KEYS]
    if unknown:
        raise fail(f"unknown key {unknown[0]!r} in [cluster] (keys: {', '.join(CLUSTER_KEYS)})", unknown[0])
    try:
        address = text_value(table, "address")
        if address is not None:
            check_address(address)
        partition_rows = None
        if "partition_rows" in table:
            partition_rows = whole_value(table, "partition_rows", 0, minimum=MIN_PARTITION_ROWS,
                                         maximum=MAX_PARTITION_ROWS)
        sample_rows = whole_value(table, "sample_rows", DEFAULT_SAMPLE_ROWS, minimum=MIN_SAMPLE_ROWS,
                                  maximum=MAX_SAMPLE_ROWS)
    except StageSpecError as err:
        raise fail(str(err), getattr(err, "key", None)) from None
    return ClusterSettings(address, partition_rows, sample_rows)


@contextlib.contextmanager
def cluster_client(address: str) -> Iterator[Any]:
    """Yield a ``distributed.Client`` of the scheduler at ``address``, or of a LocalCluster of N worker
    processes started for ``local:N`` (and closed after); raise ClusterError when Dask is missing or
    the scheduler cannot be reached."""
    from ..bridges.cluster_rows import ClusterError, require_dask

    require_dask()
    check_address(address)
    from distributed import Client, LocalCluster

    local = _LOCAL.fullmatch(address)
    if local:
        with LocalCluster(n_workers=int(local.group(1)), threads_per_worker=1, dashboard_address=":0",
                          memory_limit=0) as cluster, Client(cluster) as client:
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


def fit_recipe_on_cluster(recipe: Recipe, client: Any, data: str | os.PathLike | None = None, *,
                          cancel: threading.Event | None = None, progress: ProgressFn | None = None) -> ClusterChain:
    """Return the recipe's chain fit over the cluster of ``client`` (``data`` replaces its data path)."""
    from ..bridges.cluster_chain import ClusterChain
    from .recipe_steps import replay

    settings = recipe.cluster or ClusterSettings()
    if recipe.task not in (None, "regression") or recipe.dates:
        what = "date features" if recipe.dates else f"task {recipe.task!r}"
        raise RecipeError(f"{recipe.where('data')}: a chain on a cluster fits numeric regression for now, "
                          f"not {what}")
    source = data if data is not None else recipe.data_path
    if source is None:
        raise RecipeError(f"{recipe.where('data')}: [data] has no 'path' (name the data there or pass --data)")
    frame = read_cluster_data(source, settings.partition_rows)
    try:
        chain = ClusterChain(frame, recipe.target, recipe.validation, recipe.loss, client=client, seed=recipe.seed,
                             ignore=recipe.ignore, features=None if recipe.features is None else list(recipe.features),
                             sample_rows=settings.sample_rows, source=Path(os.fspath(source)).name,
                             data_path=source)
    except ValidationSpecError as err:
        raise RecipeError(f"{recipe.where('validation')}: {err}") from None
    chain.cluster_settings = settings
    replay(chain, recipe, cancel=cancel, progress=progress)
    return chain
