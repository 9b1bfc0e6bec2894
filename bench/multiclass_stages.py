"""100 tree stages (depth 3, shrinkage 0.1) of a 10-class chain through the chain against
scikit-learn's GradientBoostingClassifier with the same settings on the same rows.

The data is scikit-learn's ``make_classification`` with 10 classes (20 features, 10 of them
informative). The chain fits on every row (AllRows), exactly the rows the reference fits on,
starts from the log of each class's prior as the reference does, and fits one tree per class a
stage as the reference fits K trees a round; its probabilities must agree with the reference's
to 1e-6.

    python bench/multiclass_stages.py [--rows N] [--stages N] [--repeats N]
"""

from __future__ import annotations

import functools
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.datasets import make_classification
from sklearn.ensemble import GradientBoostingClassifier

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402

FEATURES = 20
CLASSES = 10


def frame_of(rows: int) -> pd.DataFrame:
    """Return ``rows`` rows of a 10-class problem: features x0..x19 and the class ``y`` (0 to 9)."""
    X, y = make_classification(n_samples=rows, n_features=FEATURES, n_informative=10, n_redundant=4,
                               n_classes=CLASSES, n_clusters_per_class=1, class_sep=0.8, random_state=0)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(FEATURES)])
    frame["y"] = y
    return frame


def timed(fn: Callable[[], object]) -> tuple[float, float]:
    """Return the wall and the process CPU seconds of one call of ``fn``."""
    wall, cpu = time.perf_counter(), time.process_time()
    fn()
    return time.perf_counter() - wall, time.process_time() - cpu


def figures(rows: int, n_stages: int, repeats: int) -> tuple[tuple[float, float], tuple[float, float], float]:
    """Return the best-of (wall, CPU) seconds of the chain and of the reference, measured in turn, and
    the largest difference between their probabilities. Both fit on one core, so on a shared
    machine the CPU seconds show what the wall clock loses to other processes."""
    frame = frame_of(rows)
    X, y = frame.drop(columns="y").to_numpy(), frame["y"].to_numpy()
    reference = GradientBoostingClassifier(n_estimators=n_stages, max_depth=3, learning_rate=0.1, random_state=0)
    ours = theirs = (float("inf"), float("inf"))
    chain = None
    for _ in range(repeats):
        theirs = min(theirs, timed(lambda: reference.fit(X, y)))
        chain = stages.Chain(frame, "y", stages.AllRows(), task="multiclass", seed=0)
        ours = min(ours, timed(functools.partial(chain.add, "tree", 0.1, params={"max_depth": 3}, repeat=n_stages)))
    gap = float(np.max(np.abs(chain.predict_proba(frame) - reference.predict_proba(X))))
    assert gap <= 1e-6, f"chain and GradientBoostingClassifier disagree by {gap:.3g}"
    return ours, theirs, gap


def main() -> None:
    """Print the figure."""
    parse = common.parser(__doc__.splitlines()[0], 10_000)
    parse.add_argument("--stages", type=int, default=100)
    parse.add_argument("--repeats", type=int, default=1, help="measure each side this many times, keep the best")
    args = parse.parse_args()
    ours, theirs, gap = figures(args.rows, args.stages, args.repeats)
    common.print_table("multiclass tree stages", [
        (f"{args.stages} tree stages, {CLASSES} classes, {args.rows:,} x {FEATURES}", f"{ours[0]:.2f} s",
         f"{theirs[0]:.2f} s (GradientBoostingClassifier)", f"{ours[0] / theirs[0]:.3f} (<= 1.05)"),
        ("the same, process CPU time", f"{ours[1]:.2f} s", f"{theirs[1]:.2f} s", f"{ours[1] / theirs[1]:.3f}"),
        ("largest probability difference", f"{gap:.1e}", "0", "(<= 1e-6)"),
    ])


if __name__ == "__main__":
    main()
