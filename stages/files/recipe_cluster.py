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

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from ..cluster_address import check_address
from ..errors import RecipeError, StageSpecError
from ..parsing import shown, text_value, whole_value

CLUSTER_KEYS = ("address", "partition_rows", "sample_rows")
#: limits on what a recipe may ask of a cluster (the sample is held on this machine)
MIN_PARTITION_ROWS, MAX_PARTITION_ROWS = 1_000, 100_000_000
MIN_SAMPLE_ROWS, MAX_SAMPLE_ROWS = 100, 2_000_000
DEFAULT_SAMPLE_ROWS = 200_000


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




def cluster_of(chain: Any) -> ClusterSettings | None:
    """Return the ``[cluster]`` table of a chain's recipe: its own settings, or for a chain on a cluster
    built in Python its sample size; None for a chain in memory."""
    settings = getattr(chain, "cluster_settings", None)
    if settings is None and hasattr(chain, "sample_rows"):
        settings = ClusterSettings(sample_rows=int(chain.sample_rows))
    return settings
