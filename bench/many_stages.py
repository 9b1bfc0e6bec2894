"""Many small stages: 100 hist_tree stages against LightGBM's own 100 rounds, the time outside the
learners' fit over 300 tree stages grown with patience, and 100 hist_tree stages beside a busy process.

(a) 100 ``hist_tree`` stages (depth 3, shrinkage 0.1) on ROWS x FEATURES with a 20 % holdout,
    against ``lightgbm.train`` for 100 rounds with the same parameters (the stage's resolved
    LightGBM parameters at learning rate 0.1, the same binning sample and seed, the holdout as its
    validation set) on the same fitting rows from the same start. The two run in turn, REPEATS
    times; the figure is the median of the ratios. The chain's output must equal LightGBM's
    prediction to 1e-9 (the trees are the same; only the order of the sums differs).
(b) 300 ``tree`` stages (depth 3, shrinkage 0.1) grown with patience on TREE_ROWS x 20: the time
    spent inside scikit-learn's ``DecisionTreeRegressor.fit`` against the whole grow.
(c) (a)'s chain alone against the same with a second process keeping one core busy, run in turn.
(d) with ``--in-turn N``: N stages against N rounds of (a)'s ``lightgbm.train`` booster, one stage
    and one round in turn in one process, so a burst of other work on the machine slows both.

    python bench/many_stages.py [--rows N] [--features N] [--repeats N] [--tree-rows N] [--skip-busy]
                                [--skip-trees] [--in-turn N]
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402

N_STAGES = 100


def chain_seconds(frame) -> tuple[float, stages.Chain]:
    """Return the seconds 100 hist_tree stages take on a fresh chain over ``frame``, and the chain."""
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    started = time.perf_counter()
    chain.add("hist_tree", 0.1, params={"max_depth": 3}, repeat=N_STAGES)
    return time.perf_counter() - started, chain


def lightgbm_seconds(chain: stages.Chain) -> tuple[float, np.ndarray]:
    """Return the seconds of ``lightgbm.train`` for 100 rounds with the stages' parameters on the chain's
    fitting rows (holdout as validation set, from the chain's start), and its raw prediction on every row."""
    import lightgbm

    native = dict(chain.stages[0].learners[0].params)
    native.update(learning_rate=0.1, seed=0)
    n_train = chain.layout.n_train
    start = float(chain.starts[0][0])
    X, y = chain.matrix, chain.y
    started = time.perf_counter()
    train = lightgbm.Dataset(X[:n_train], y[:n_train], init_score=np.full(n_train, start), params=native)
    valid = lightgbm.Dataset(X[n_train:], y[n_train:], init_score=np.full(len(y) - n_train, start), reference=train)
    booster = lightgbm.train(native, train, num_boost_round=N_STAGES, valid_sets=[valid])
    seconds = time.perf_counter() - started
    return seconds, booster.predict(X, raw_score=True) + start


def hist_tree_ratio(frame, repeats: int) -> tuple[list[float], list[float], float]:
    """Return the chain's and LightGBM's seconds per run, taken in turn, and the largest output gap."""
    ours, theirs, gap = [], [], 0.0
    for _ in range(repeats):
        seconds, chain = chain_seconds(frame)
        ours.append(seconds)
        seconds, raw = lightgbm_seconds(chain)
        theirs.append(seconds)
        gap = max(gap, float(np.max(np.abs(raw - chain.outputs()[0][:, 0]))))
    assert gap <= 1e-9, f"the chain and LightGBM disagree by {gap:.3g}"
    return ours, theirs, gap


def stage_against_round(frame, n: int) -> tuple[float, float]:
    """Return the seconds of ``n`` hist_tree stages and of ``n`` rounds of ``lightgbm.train``'s booster
    (``update`` and ``eval_valid``, the holdout as its valid set), one stage and one round in turn in
    this process, after a first stage and a first round each, so a burst of other work slows both."""
    import lightgbm

    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    chain.add("hist_tree", 0.1, params={"max_depth": 3})
    native = dict(chain.stages[0].learners[0].params)
    native.update(learning_rate=0.1, seed=0)
    n_train, start = chain.layout.n_train, float(chain.starts[0][0])
    X, y = chain.matrix, chain.y
    train = lightgbm.Dataset(X[:n_train], y[:n_train], init_score=np.full(n_train, start), params=native)
    valid = train.create_valid(X[n_train:], y[n_train:], init_score=np.full(len(y) - n_train, start))
    booster = lightgbm.train(native, train, num_boost_round=1, valid_sets=[valid], keep_training_booster=True)
    ours = theirs = 0.0
    for _ in range(n):
        started = time.perf_counter()
        chain.add("hist_tree", 0.1, params={"max_depth": 3})
        ours += time.perf_counter() - started
        started = time.perf_counter()
        booster.update()
        booster.eval_valid()
        theirs += time.perf_counter() - started
    return ours, theirs


def tree_share(rows: int, n_stages: int = 300) -> tuple[float, float, int]:
    """Return (seconds of the grow, seconds inside DecisionTreeRegressor.fit, stages grown) for
    ``n_stages`` tree stages grown with patience on ``rows`` x 20."""
    from sklearn.tree import DecisionTreeRegressor

    inside = [0.0]
    fit = DecisionTreeRegressor.fit

    def timed_fit(self, *args, **kwargs):
        started = time.perf_counter()
        try:
            return fit(self, *args, **kwargs)
        finally:
            inside[0] += time.perf_counter() - started

    frame = common.make_regression_frame(rows, 20)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    DecisionTreeRegressor.fit = timed_fit
    try:
        started = time.perf_counter()
        result = chain.grow("tree", 0.1, params={"max_depth": 3}, max_stages=n_stages, patience=n_stages)
        total = time.perf_counter() - started
    finally:
        DecisionTreeRegressor.fit = fit
    return total, inside[0], result.grown


BUSY = "import time\nend = time.time() + 3600\nwhile time.time() < end:\n    pass\n"


def busy_ratio(frame, repeats: int) -> tuple[list[float], list[float]]:
    """Return (seconds alone, seconds beside a process spinning on one core) of 100 hist_tree stages, in turn."""
    alone, beside = [], []
    for _ in range(repeats):
        alone.append(chain_seconds(frame)[0])
        spinner = subprocess.Popen([sys.executable, "-c", BUSY])
        try:
            time.sleep(0.5)
            beside.append(chain_seconds(frame)[0])
        finally:
            spinner.kill()
            spinner.wait()
    return alone, beside


def main() -> None:
    """Print the figures."""
    parse = common.parser(__doc__.splitlines()[0], 200_000)
    parse.add_argument("--features", type=int, default=20)
    parse.add_argument("--repeats", type=int, default=3, help="runs of each side, in turn; the median is shown")
    parse.add_argument("--tree-rows", type=int, default=100_000, help="rows for the 300 tree stages")
    parse.add_argument("--skip-busy", action="store_true", help="leave out the figure beside a busy process")
    parse.add_argument("--skip-trees", action="store_true", help="leave out the 300 tree stages")
    parse.add_argument("--in-turn", type=int, default=0, metavar="N",
                       help="also N stages against N lightgbm.train rounds, one of each in turn in one process")
    args = parse.parse_args()
    frame = common.make_regression_frame(args.rows, args.features)
    ours, theirs, gap = hist_tree_ratio(frame, args.repeats)
    ratios = [a / b for a, b in zip(ours, theirs, strict=True)]
    size = f"{args.rows:,} x {args.features}"
    rows = [
        (f"{N_STAGES} hist_tree stages (depth 3, shrinkage 0.1), {size}, median of {args.repeats}",
         f"{statistics.median(ours):.2f} s", f"{statistics.median(theirs):.2f} s (lightgbm.train, {N_STAGES} rounds)",
         f"{statistics.median(ratios):.2f} (<= 1.5); runs {', '.join(f'{r:.2f}' for r in ratios)}"),
        ("  largest output difference against LightGBM", f"{gap:.1e}", "0", "(<= 1e-9)"),
    ]
    if args.in_turn:
        ours_each, theirs_each = stage_against_round(frame, args.in_turn)
        rows.append((f"one hist_tree stage against one lightgbm.train round, in turn, {args.in_turn} of each, {size}",
                     f"{ours_each / args.in_turn * 1000:.1f} ms", f"{theirs_each / args.in_turn * 1000:.1f} ms",
                     f"{ours_each / theirs_each:.2f}"))
    if not args.skip_trees:
        total, inside, grown = tree_share(args.tree_rows)
        rows.append((f"{grown} tree stages (depth 3) grown with patience, {args.tree_rows:,} x 20",
                     f"{total - inside:.2f} s outside fit", f"{total:.2f} s in all ({inside:.2f} s in fit)",
                     f"{(total - inside) / total * 100:.1f} % (< 5 %)"))
    if not args.skip_busy:
        alone, beside = busy_ratio(frame, args.repeats)
        busy = [b / a for a, b in zip(alone, beside, strict=True)]
        rows.append((f"{N_STAGES} hist_tree stages beside a process busy on one core, {size}",
                     f"{statistics.median(beside):.2f} s", f"{statistics.median(alone):.2f} s (alone)",
                     f"{statistics.median(busy):.2f} (<= 2.5); runs {', '.join(f'{r:.2f}' for r in busy)}"))
    common.print_table("many small stages", rows)


if __name__ == "__main__":
    main()
