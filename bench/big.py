"""10,000,000 x 20 with LightGBM stages: a chain of linear + 2 LightGBM stages (100 rounds each)
against LightGBM alone doing the same work by hand, on the same rows.

The reference: scikit-learn's LinearRegression on the fitting rows, then twice
``lightgbm.train`` (the stages' own parameters and seeds) from ``init_score`` set to the output so
far, each followed by ``booster.predict`` on every row, as the chain caches every stage's output.
Building the chain (reading the frame, choosing the split) is reported on its own line.
Targets: fits without running out of memory; ratio <= 1.10.

    python bench/big.py [--rows N] [--features N] [--rounds N]
"""

from __future__ import annotations

import resource
import sys
import time
from pathlib import Path

import lightgbm
import numpy as np
from sklearn.linear_model import LinearRegression

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402


def reference(chain: stages.Chain) -> tuple[list[float], np.ndarray]:
    """Return (seconds of each part, raw output on every row) of the chain's work done with the bare libraries."""
    fit, X, y = chain.layout.train, chain.matrix, chain.y
    started = time.perf_counter()
    linear = LinearRegression().fit(X[fit], y[fit] - chain.starts[0])
    raw = chain.starts[0] + linear.predict(X)
    parts = [time.perf_counter() - started]
    for stage in chain.stages[1:]:
        started = time.perf_counter()
        data = lightgbm.Dataset(X[fit], label=y[fit], init_score=raw[fit], free_raw_data=True)
        params = dict(stage.learners[0].params)
        booster = lightgbm.train(params, data, num_boost_round=stage.learners[0].rounds)
        raw = raw + booster.predict(X, raw_score=True)
        parts.append(time.perf_counter() - started)
    return parts, raw


def main() -> None:
    """Print the figures."""
    parse = common.parser(__doc__.splitlines()[0], 10_000_000)
    parse.add_argument("--features", type=int, default=20)
    parse.add_argument("--rounds", type=int, default=100)
    args = parse.parse_args()
    frame = common.make_regression_frame(args.rows, args.features)
    started = time.perf_counter()
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    built = time.perf_counter() - started
    del frame
    started = time.perf_counter()
    chain.add("linear")
    chain.add("lightgbm", params={"n_estimators": args.rounds}, repeat=2)
    ours = time.perf_counter() - started
    parts, raw = reference(chain)
    theirs = sum(parts)
    gap = float(np.max(np.abs(chain.outputs()[0] - raw)))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    size = f"{args.rows:,} x {args.features}"
    common.print_table("big data", [
        (f"linear + 2 lightgbm stages ({args.rounds} rounds), {size}", f"{ours:.1f} s",
         f"{theirs:.1f} s (LightGBM alone, same work)", f"{ours / theirs:.3f} (<= 1.10)"),
        ("  per stage: linear, lightgbm, lightgbm", " / ".join(f"{s.fit_seconds:.1f}" for s in chain.stages) + " s",
         " / ".join(f"{p:.1f}" for p in parts) + " s", ""),
        ("building the chain (roles, split, matrix)", f"{built:.1f} s", "none", ""),
        ("largest output difference from the reference", f"{gap:.1e}", "0", ""),
        ("peak memory of the process (chain and reference)", f"{peak:.1f} GiB",
         f"{args.rows * args.features * 8 / 2**30:.1f} GiB (data in float64)", "fits in memory"),
    ])


if __name__ == "__main__":
    main()
