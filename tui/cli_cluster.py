"""The ``--cluster`` forms of ``remnant fit`` and ``remnant predict``: the rows on a Dask cluster.

    remnant fit RECIPE --cluster local:2 --out CHAIN
    remnant predict CHAIN 'data/*.parquet' --cluster tcp://scheduler:8786 --out FOLDER

Without Dask installed, ``--cluster`` is an error naming the extra to install.
"""

from __future__ import annotations

import argparse
import sys
from typing import Any


def cluster_address(args: argparse.Namespace, recipe: Any = None) -> str | None:
    """Return the cluster to run on: ``--cluster``, else the recipe's ``[cluster] address``, else None."""
    if getattr(args, "cluster", None):
        return str(args.cluster)
    settings = getattr(recipe, "cluster", None)
    return None if settings is None else settings.address


def fit_on_cluster(args: argparse.Namespace, recipe: Any, address: str) -> Any:
    """Return the recipe's chain fit on the cluster at ``address`` and saved to ``--out``."""
    from stages.files.recipe_cluster import check_address, cluster_client, fit_recipe_on_cluster

    from .cli import Progress, _one_line

    check_address(address)
    _quiet_lightgbm()
    progress = Progress(sys.stderr)
    with cluster_client(address) as client:
        try:
            chain = fit_recipe_on_cluster(recipe, client, args.data, progress=progress)
        finally:
            progress.clear()
        for number, stage in enumerate(chain.stages, start=1):
            for note in stage.notes:
                print(f"note: stage {number} ({stage.kind}): {_one_line(note)}", file=sys.stderr)
        chain.save(args.out)
    return chain


def predict_on_cluster(args: argparse.Namespace, address: str) -> int:
    """Write the predictions of every row of DATA as Parquet parts in the new folder ``--out``; return 0."""
    from stages.bridges.cluster_predict import write_predictions
    from stages.files import store
    from stages.files.recipe_cluster import check_address, cluster_client, read_cluster_data

    from .cli import UsageError, _key

    check_address(address)
    if args.out in (None, "-"):
        raise UsageError("--cluster writes Parquet parts: give the new folder with --out FOLDER")
    if args.each_stage:
        raise UsageError("--each-stage is not served with --cluster yet")
    fitted = store.load(args.chain, key=_key(args, from_environment=False))
    with cluster_client(address):
        frame = read_cluster_data(args.data)
        parts = write_predictions(fitted, frame, args.out, row_id=args.id or None)
    print(f"wrote {parts} Parquet part(s) to {args.out}", file=sys.stderr)
    return 0


def _quiet_lightgbm() -> None:
    """Send what lightgbm.dask says of its network (ports, ranks) to the log, not the terminal."""
    import logging

    import lightgbm

    lightgbm.register_logger(logging.getLogger("remnant.lightgbm"))
