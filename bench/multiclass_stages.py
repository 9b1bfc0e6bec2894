"""100 tree stages (depth 3, shrinkage 0.1) of a 10-class chain through the chain against
scikit-learn's GradientBoostingClassifier with the same settings on the same rows.

The data is scikit-learn's ``make_classification`` with 10 classes (20 features, 10 of them
informative). The chain fits on every row (AllRows), exactly the rows the reference fits on,
starts from the log of each class's prior as the reference does, and fits one tree per class a
stage as the reference fits K trees a round; its probabilities must agree with the reference's
to 1e-6.

    python bench/multiclass_stages.py [--rows N] [--stages N]
"""

from __future__ import annotations

import sys
import time
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


def figures(rows: int, n_stages: int) -> tuple[float, float, float]:
    """Return (chain seconds, reference seconds), each measured once in turn, and the largest
    difference between their probabilities."""
    frame = frame_of(rows)
    X, y = frame.drop(columns="y").to_numpy(), frame["y"].to_numpy()
    reference = GradientBoostingClassifier(n_estimators=n_stages, max_depth=3, learning_rate=0.1, random_state=0)
    theirs = common.best_of(lambda: reference.fit(X, y))
    chain = stages.Chain(frame, "y", stages.AllRows(), task="multiclass", seed=0)
    started = time.perf_counter()
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=n_stages)
    ours = time.perf_counter() - started
    gap = float(np.max(np.abs(chain.predict_proba(frame) - reference.predict_proba(X))))
    assert gap <= 1e-6, f"chain and GradientBoostingClassifier disagree by {gap:.3g}"
    return ours, theirs, gap


def main() -> None:
    """Print the figure."""
    parse = common.parser(__doc__.splitlines()[0], 20_000)
    parse.add_argument("--stages", type=int, default=100)
    args = parse.parse_args()
    ours, theirs, gap = figures(args.rows, args.stages)
    common.print_table("multiclass tree stages", [
        (f"{args.stages} tree stages, {CLASSES} classes, {args.rows:,} x {FEATURES}", f"{ours:.2f} s",
         f"{theirs:.2f} s (GradientBoostingClassifier)", f"{ours / theirs:.3f} (<= 1.05)"),
        ("largest probability difference", f"{gap:.1e}", "0", "(<= 1e-6)"),
    ])


if __name__ == "__main__":
    main()
