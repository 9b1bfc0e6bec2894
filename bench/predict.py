"""Predicting with a saved chain, and loading a chain file.

(a) A 20-stage chain (linear, 10 tree stages of depth 3, 9 hist_tree stages of depth 4), fit on
``--fit-rows`` rows, saved with ``stages.files.store.save`` and read back with ``stages.load``, predicts
``--rows`` rows from a DataFrame; the reference is the sum of the bare learners' own predict
times on the same rows as a float64 matrix (the chain adds reading the frame against the
schema and summing the stages). Target: ratio <= 1.10.
(b) Loading a 100-stage chain file (100 tree stages, the commonest long chain): target under 1 s.

    python bench/predict.py [--rows N] [--fit-rows N] [--load-stages N]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402
from stages.files.store import save  # noqa: E402

FEATURES = 50


def twenty_stage_file(folder: Path, fit_rows: int) -> Path:
    """Return the path of a saved 20-stage chain fit on ``fit_rows`` rows."""
    frame = common.make_regression_frame(fit_rows, FEATURES, seed=1)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    chain.add("linear")
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=10)
    chain.add("hist_tree", 0.3, params={"max_depth": 4}, repeat=9)
    path = folder / "twenty.chain"
    save(chain, path)
    return path


def bare_predict(fitted: stages.FittedChain, X: np.ndarray) -> tuple[float, np.ndarray]:
    """Return the summed predict time of the bare learners on ``X``, and the raw output."""
    total, raw = 0.0, np.full(len(X), fitted.start)
    for stage in fitted.stages:
        cols = list(stage.feature_index)
        block = X if cols == list(range(X.shape[1])) else X[:, cols]
        started = time.perf_counter()
        out = stage.learner.predict(block)
        total += time.perf_counter() - started
        raw += stage.scale * out
    return total, raw


def predict_figures(fitted: stages.FittedChain, rows: int, repeats: int) -> tuple[float, float]:
    """Return the best-of (chain seconds, bare seconds), the two measured in turn ``repeats`` times."""
    frame = common.make_regression_frame(rows, FEATURES, seed=3).drop(columns="y")
    X = frame.to_numpy(dtype=np.float64)  # what a user of the bare learners would pass them
    ours = bare = float("inf")
    for _ in range(repeats):
        seconds, expected = bare_predict(fitted, X)
        bare = min(bare, seconds)
        started = time.perf_counter()
        got = fitted.predict(frame)
        ours = min(ours, time.perf_counter() - started)
        gap = float(np.max(np.abs(got - expected)))
        assert gap <= 1e-9, f"chain and bare learners disagree by {gap:.3g}"
    return ours, bare


def load_seconds(folder: Path, n_stages: int, repeats: int) -> float:
    """Return the best-of time of ``stages.load`` on a chain file of ``n_stages`` tree stages."""
    frame = common.make_regression_frame(5_000, 10, seed=2)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=n_stages)
    path = folder / "long.chain"
    save(chain, path)
    return common.best_of(lambda: stages.load(path), repeats)


def main() -> None:
    """Print the figures."""
    parse = common.parser(__doc__.splitlines()[0], 1_000_000)
    parse.add_argument("--fit-rows", type=int, default=100_000, help="rows the 20-stage chain is fit on")
    parse.add_argument("--load-stages", type=int, default=100)
    parse.add_argument("--repeats", type=int, default=5, help="measure each side this many times, keep the best")
    args = parse.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        fitted = stages.load(twenty_stage_file(Path(folder), args.fit_rows))
        ours, bare = predict_figures(fitted, args.rows, args.repeats)
        load = load_seconds(Path(folder), args.load_stages, args.repeats)
    common.print_table("predicting with a saved chain", [
        (f"predict {args.rows:,} x {FEATURES} rows, 20 stages (from a DataFrame)", f"{ours:.2f} s",
         f"{bare:.2f} s (sum of bare learners' predict)", f"{ours / bare:.3f} (<= 1.10)"),
        (f"load a {args.load_stages}-stage chain file (tree stages)", f"{load:.3f} s", "none", "(under 1 s)"),
    ])


if __name__ == "__main__":
    main()
