"""The exact linear-family stages on a Dask cluster (ridge, a poisson glm), against the in-memory stages.

Method: ``common.make_regression_frame`` of ``--rows`` x ``--features``, 2 % of the values missing,
and a poisson count; the cluster chain (``Chain.from_dask`` over ``--partitions`` partitions on a
``LocalCluster`` of ``--workers`` processes, one thread each, started here) against the in-memory
chain on the same parts (a split column from the same hash of the row labels). Each side's time
is one stage's ``add``; the cluster's design (exact medians, means and deviations by reductions)
is learnt by the first linear-family stage and timed on its own. Before printing, both sides'
predictions must agree to 1e-8.

- linear: the cluster stage with its design learnt from every fitting row, against the same stage
  with the design learnt from the sample (as before the design was exact), in the same run.
- ridge (alpha 10) and glm (poisson, alpha 0): the cluster stage against the in-memory stage.

    python bench/cluster_exact.py [--rows 1000000] [--features 20] [--workers 2] [--partitions 8]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import stages  # noqa: E402
from stages.bridges import cluster_fit, cluster_lstsq  # noqa: E402
from stages.bridges.cluster_rows import VALID, part_codes  # noqa: E402
from stages.kinds.design import LinearDesign  # noqa: E402


def timed(chain: stages.Chain, kind: str, **params: object) -> float:
    """Return the seconds one stage's ``add`` takes."""
    started = time.perf_counter()
    chain.add(kind, params=params)
    return time.perf_counter() - started


def main() -> None:
    """Print the figures."""
    import dask.dataframe as dd
    from distributed import Client, LocalCluster

    parse = common.parser(__doc__.splitlines()[0], 1_000_000)
    parse.add_argument("--features", type=int, default=20)
    parse.add_argument("--workers", type=int, default=2)
    parse.add_argument("--partitions", type=int, default=8)
    args = parse.parse_args()
    frame = common.make_regression_frame(args.rows, args.features)
    rng = np.random.default_rng(1)
    features = [c for c in frame.columns if c != "y"]
    values = frame[features].to_numpy().copy()
    frame["count"] = rng.poisson(np.exp(0.3 * np.tanh(values[:, :3]).sum(axis=1)))
    values[rng.uniform(size=values.shape) < 0.02] = np.nan
    frame[features] = values
    frame["split"] = np.where(part_codes(frame.index.to_numpy(), 0.2, 0.0, 1) == VALID, "valid", "train")
    split = stages.SplitColumn("split")
    with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster, \
            Client(cluster) as client:
        ddf = dd.from_pandas(frame, npartitions=args.partitions)
        on_cluster = stages.Chain.from_dask(ddf, "y", stages.Holdout(0.2, seed=1), client, seed=0, features=features)
        original = cluster_fit.exact_design
        sample = on_cluster.sample[0]
        cluster_fit.exact_design = lambda rows, columns_at, columns: LinearDesign.fit(sample[:, list(columns_at)], columns)
        sampled_s = timed(on_cluster, "linear")
        cluster_fit.exact_design = original
        on_cluster.step_back()
        started = time.perf_counter()
        cluster_lstsq.exact_design(on_cluster.rows, tuple(range(len(features))), on_cluster.schema.columns)
        design_s = time.perf_counter() - started
        linear_s = timed(on_cluster, "linear")
        on_cluster.step_back()
        ridge_s = timed(on_cluster, "ridge", alpha=10.0)
        memory = stages.Chain(frame.drop(columns="count"), "y", split, seed=0, features=features)
        memory_ridge_s = timed(memory, "ridge", alpha=10.0)
        np.testing.assert_allclose(on_cluster.predict(frame), memory.predict(frame), rtol=1e-8)
        counts = stages.Chain.from_dask(ddf, "count", stages.Holdout(0.2, seed=1), client, loss="poisson", seed=0,
                                        features=features)
        glm_s = timed(counts, "glm")  # learns its design: the rows are another chain's
        memory = stages.Chain(frame.drop(columns="y"), "count", split, loss="poisson", seed=0, features=features)
        memory_glm_s = timed(memory, "glm")
        np.testing.assert_allclose(counts.predict(frame), memory.predict(frame), rtol=1e-8)
    size = f"{args.rows:,} x {args.features}, {args.partitions} partitions, local:{args.workers}"
    common.print_table("exact linear-family stages on a cluster", [
        (f"linear, design from every fitting row, {size}", f"{design_s + linear_s:.2f} s "
         f"(design {design_s:.2f} s)", f"{sampled_s:.2f} s (design from the sample)",
         f"{(design_s + linear_s) / sampled_s:.2f}"),
        ("ridge (alpha 10), design already learnt", f"{ridge_s:.2f} s", f"{memory_ridge_s:.2f} s (in memory)",
         f"{ridge_s / memory_ridge_s:.2f}"),
        ("glm (poisson), its design learnt", f"{glm_s:.2f} s", f"{memory_glm_s:.2f} s (in memory)",
         f"{glm_s / memory_glm_s:.2f}"),
    ])


if __name__ == "__main__":
    main()
