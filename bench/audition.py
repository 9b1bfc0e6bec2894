"""Audition speed: four candidate stages fit side by side on two workers against fitting them one after another.

    python bench/audition.py [--rows N] [--trees N] [--repeats N]

The candidates: a forest trying p/3 and one trying p/2 features at each split, and a
LightGBM stage with 15 and one with 63 leaves, each after a linear stage. The audition gives
each candidate's learner its share of the chain's threads (threads // workers); one after
another, each learner runs on all of them. The rows marked "n_jobs set to every core" ask each
candidate for every core: the audition lowers that to its share, so those rows should match
the shared ones. The last two rows time the LightGBM candidates alone.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402


def candidates(trees: int, lightgbm_threads: int | None = None) -> list[stages.StageSpec]:
    """Return the four candidate specs; ``lightgbm_threads`` sets LightGBM's n_jobs (None: left unset)."""
    threads = {} if lightgbm_threads is None else {"n_jobs": lightgbm_threads}
    return [
        stages.StageSpec("forest", 0.5, params={"n_estimators": trees, "max_features": 1 / 3}),
        stages.StageSpec("forest", 0.5, params={"n_estimators": trees, "max_features": 0.5}),
        stages.StageSpec("lightgbm", 0.5, params={"num_leaves": 15, **threads}),
        stages.StageSpec("lightgbm", 0.5, params={"num_leaves": 63, **threads}),
    ]


def one_after_another(chain: stages.Chain, specs: list[stages.StageSpec]) -> None:
    """Fit each spec as the next stage and step back: what a user would do without an audition."""
    for spec in specs:
        chain.add_specs([spec])
        chain.step_back()


def main() -> None:
    """Print the audition figures."""
    parse = common.parser(__doc__.splitlines()[0], 200_000)
    parse.add_argument("--trees", type=int, default=20, help="trees per forest candidate (default 20)")
    parse.add_argument("--repeats", type=int, default=1, help="best of this many runs (default 1)")
    args = parse.parse_args()
    frame = common.make_regression_frame(args.rows, 20)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    del frame
    chain.add("linear")
    specs, greedy = candidates(args.trees), candidates(args.trees, os.cpu_count())
    runs = {
        "alone": lambda: one_after_another(chain, specs),
        "shared": lambda: chain.audition(specs, workers=2),
        "every_core": lambda: chain.audition(greedy, workers=2),
        "boosters_alone": lambda: one_after_another(chain, specs[2:]),
        "boosters_shared": lambda: chain.audition(specs[2:], workers=2),
        "boosters_every_core": lambda: chain.audition(greedy[2:], workers=2),
    }
    # interleaved, so that a change in the machine's load falls on every figure alike
    best = dict.fromkeys(runs, float("inf"))
    for _ in range(max(1, args.repeats)):
        for name, run in runs.items():
            best[name] = min(best[name], common.best_of(run))
    size = f"{args.rows:,} x 20, forests of {args.trees} trees"
    cores = os.cpu_count()
    common.print_table("audition of 4 candidates on 2 workers", [
        _row(f"audition, {size}", best["shared"], best["alone"], " (<= 1.1)"),
        _row(f"same, n_jobs set to every core ({cores})", best["every_core"], best["alone"]),
        _row("the 2 LightGBM candidates only", best["boosters_shared"], best["boosters_alone"]),
        _row(f"same, n_jobs set to every core ({cores})", best["boosters_every_core"], best["boosters_alone"]),
    ])


def _row(figure: str, ours: float, reference: float, target: str = "") -> tuple[str, str, str, str]:
    return figure, f"{ours:.2f} s", f"{reference:.2f} s (one after another)", f"{ours / reference:.3f}{target}"


if __name__ == "__main__":
    main()
