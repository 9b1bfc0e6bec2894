"""The ``--cluster`` forms of ``remnant fit`` and ``remnant predict``: the rows on a Dask cluster.

    remnant fit RECIPE --cluster local:2 --out CHAIN
    remnant predict CHAIN 'data/*.parquet' --cluster tcp://scheduler:8786 --out FOLDER

Without Dask installed, ``--cluster`` is an error naming the extra to install.
"""

from __future__ import annotations

import argparse
import os
import sys
import threading
from pathlib import Path
from typing import Any


def cluster_address(args: argparse.Namespace, recipe: Any = None) -> str | None:
    """Return the cluster to run on: ``--cluster``, else the recipe's ``[cluster] address``, else None."""
    if getattr(args, "cluster", None):
        return str(args.cluster)
    settings = getattr(recipe, "cluster", None)
    return None if settings is None else settings.address


def fit_on_cluster(args: argparse.Namespace, recipe: Any, address: str) -> Any:
    """Return the recipe's chain fit on the cluster at ``address`` and saved to ``--out``."""
    from stages.bridges.cluster_data import cluster_client
    from stages.cluster_address import check_address

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
    from stages.bridges.cluster_data import cluster_client, read_cluster_data
    from stages.bridges.cluster_predict import write_predictions
    from stages.cluster_address import check_address
    from stages.files import store

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


def fit_recipe_on_cluster(recipe: Any, client: Any, data: str | os.PathLike | None = None, *,
                          cancel: threading.Event | None = None, progress: Any = None) -> Any:
    """Return the recipe's chain fit over the cluster of ``client`` (``data`` replaces its data path)."""
    from stages.bridges.cluster_chain import ClusterChain
    from stages.bridges.cluster_data import read_cluster_data
    from stages.errors import RecipeError, ValidationSpecError
    from stages.files.recipe_cluster import ClusterSettings
    from stages.files.recipe_steps import replay

    settings = recipe.cluster or ClusterSettings()
    unserved = [what for what, asked in (("date features", recipe.dates),
                                         (f"task {recipe.task!r}", recipe.task not in (None, "regression")))
                if asked]
    if unserved:
        what = unserved[0]
        raise RecipeError(f"{recipe.where('data')}: a chain on a cluster fits numeric regression for now, "
                          f"not {what}")
    source = data if data is not None else recipe.data_path
    if source is None:
        raise RecipeError(f"{recipe.where('data')}: [data] has no 'path' (name the data there or pass --data)")
    frame = read_cluster_data(source, settings.partition_rows)
    try:
        chain = ClusterChain(frame, recipe.target, recipe.validation, recipe.loss, client=client, seed=recipe.seed,
                             power=recipe.power, exposure=recipe.exposure, weight=recipe.weight,
                             ignore=recipe.ignore, features=None if recipe.features is None else list(recipe.features),
                             sample_rows=settings.sample_rows, source=Path(os.fspath(source)).name,
                             data_path=source)
    except ValidationSpecError as err:
        raise RecipeError(f"{recipe.where('validation')}: {err}") from None
    chain.cluster_settings = settings
    replay(chain, recipe, cancel=cancel, progress=progress)
    return chain


def _quiet_lightgbm() -> None:
    """Send what lightgbm.dask says of its network (ports, ranks) to the log, not the terminal."""
    import logging

    import lightgbm

    lightgbm.register_logger(logging.getLogger("remnant.lightgbm"))
