"""100 tree stages (depth 3, shrinkage 0.1) through the chain against scikit-learn's
GradientBoostingRegressor with the same settings on the same rows.

The chain fits on every row (AllRows), exactly the rows the reference fits on, starts from
the mean as the reference does, and its predictions must agree with the reference's to 1e-9.

    python bench/tree_stages.py [--rows N] [--stages N] [--repeats N]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from sklearn.ensemble import GradientBoostingRegressor

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402

FEATURES = 20


def figures(rows: int, n_stages: int, repeats: int) -> tuple[float, float, float]:
    """Return the best-of (chain seconds, reference seconds), measured in turn, and the largest
    prediction difference."""
    frame = common.make_regression_frame(rows, FEATURES)
    X, y = frame.drop(columns="y").to_numpy(), frame["y"].to_numpy()
    reference = GradientBoostingRegressor(n_estimators=n_stages, max_depth=3, learning_rate=0.1, random_state=0)
    ours = theirs = float("inf")
    for _ in range(repeats):
        theirs = min(theirs, common.best_of(lambda: reference.fit(X, y)))
        chain = stages.Chain(frame, "y", stages.AllRows(), seed=0)
        started = time.perf_counter()
        chain.add("tree", 0.1, params={"max_depth": 3}, repeat=n_stages)
        ours = min(ours, time.perf_counter() - started)
    gap = float(np.max(np.abs(chain.predict(frame) - reference.predict(X))))
    assert gap <= 1e-9, f"chain and GradientBoostingRegressor disagree by {gap:.3g}"
    return ours, theirs, gap


def main() -> None:
    """Print the figure."""
    parse = common.parser(__doc__.splitlines()[0], 100_000)
    parse.add_argument("--stages", type=int, default=100)
    parse.add_argument("--repeats", type=int, default=1, help="measure each side this many times, keep the best")
    args = parse.parse_args()
    ours, theirs, gap = figures(args.rows, args.stages, args.repeats)
    common.print_table("tree stages", [
        (f"{args.stages} tree stages, {args.rows:,} x {FEATURES}", f"{ours:.2f} s",
         f"{theirs:.2f} s (GradientBoostingRegressor)", f"{ours / theirs:.3f} (<= 1.05)"),
        ("largest prediction difference", f"{gap:.1e}", "0", "(<= 1e-9)"),
    ])


if __name__ == "__main__":
    main()
