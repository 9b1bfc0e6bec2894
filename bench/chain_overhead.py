"""Chain overhead: N tree stages through the chain against a bare loop of the same learners,
and step back at 1,000,000 x 50 with 20 stages against the fit time of the stage removed.

    python bench/chain_overhead.py [--rows N] [--stages N] [--wide-rows N] [--repeats N]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from sklearn.tree import DecisionTreeRegressor

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402


def bare_loop(X: np.ndarray, y: np.ndarray, n_stages: int, seed: int) -> np.ndarray:
    """Return the train output of ``n_stages`` depth-3 trees fit to residuals, with no chain around them."""
    rng = np.random.RandomState(seed)
    raw = np.full(len(y), y.mean())
    X32 = X.astype(np.float32)
    for _ in range(n_stages):
        tree = DecisionTreeRegressor(max_depth=3, random_state=rng).fit(X32, y - raw)
        raw = raw + 0.1 * tree.predict(X32)
    return raw


def tree_ratio(rows: int, n_stages: int, repeats: int = 1) -> tuple[float, float]:
    """Return (chain seconds, bare-loop seconds) for ``n_stages`` tree stages on ``rows`` rows, each
    the best of ``repeats`` runs taken in turn (so a busy spell of the machine hits both sides)."""
    frame = common.make_regression_frame(rows, 20)
    X, y = frame.drop(columns="y").to_numpy(), frame["y"].to_numpy()
    ours = bare = float("inf")
    for _ in range(max(1, repeats)):
        bare = min(bare, common.best_of(lambda: bare_loop(X, y, n_stages, 0)))
        chain = stages.Chain(frame, "y", stages.AllRows(), seed=0)
        started = time.perf_counter()
        chain.add("tree", 0.1, params={"max_depth": 3}, repeat=n_stages)
        ours = min(ours, time.perf_counter() - started)
    assert np.allclose(chain.outputs()[0], bare_loop(X, y, n_stages, 0), atol=1e-9)
    return ours, bare


def step_back_figures(rows: int) -> tuple[float, float]:
    """Return (step back milliseconds, fit seconds of the removed stage) at ``rows`` x 50 with 20 stages."""
    frame = common.make_regression_frame(rows, 50)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    del frame
    chain.add("linear")
    chain.add("hist_tree", 0.3, params={"max_depth": 4}, repeat=19)
    removed = chain.stages[-1].fit_seconds
    started = time.perf_counter()
    chain.step_back()
    chain.table()  # the rescore a user sees after stepping back
    return (time.perf_counter() - started) * 1000, removed


def main() -> None:
    """Print the two overhead figures."""
    parse = common.parser(__doc__.splitlines()[0], 100_000)
    parse.add_argument("--stages", type=int, default=100)
    parse.add_argument("--wide-rows", type=int, default=1_000_000, help="rows for the step-back figure")
    parse.add_argument("--repeats", type=int, default=2, help="measure each side this many times, keep the best")
    args = parse.parse_args()
    ours, bare = tree_ratio(args.rows, args.stages, args.repeats)
    step_ms, removed = step_back_figures(args.wide_rows)
    common.print_table("chain overhead", [
        (f"{args.stages} tree stages, {args.rows:,} x 20", f"{ours:.2f} s", f"{bare:.2f} s (bare loop)",
         f"{ours / bare:.3f} (<= 1.05)"),
        (f"step back, {args.wide_rows:,} x 50, 20 stages", f"{step_ms:.1f} ms", f"{removed * 1000:.0f} ms (refit)",
         f"{step_ms / (removed * 1000):.4f} (under 100 ms)"),
    ])


if __name__ == "__main__":
    main()
