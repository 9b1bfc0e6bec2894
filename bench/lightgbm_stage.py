"""A LightGBM stage on the residuals of a linear stage, against LightGBM trained with
``init_score`` set to the linear stage's output.

What is compared: only the LightGBM part. The linear stage is fit once, through the chain;
then "ours" is ``chain.add("lightgbm")`` and the reference is ``lightgbm.train`` with the same
parameters (and seed) on the same fitting rows, with ``init_score`` the linear output, followed
by ``booster.predict`` on the fitting and validation rows: the stage caches its output on
those rows, and a bare LightGBM user needs the same predictions to see a validation score.
The final outputs of both must agree to 1e-6.

    python bench/lightgbm_stage.py [--rows N] [--features N] [--rounds N] [--repeats N]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import lightgbm
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402


def reference(chain: stages.Chain, params: dict, rounds: int) -> tuple[float, np.ndarray]:
    """Return (seconds, raw output on every chain row) of bare LightGBM from the output before the last stage."""
    fit = chain.layout.train
    offset = chain.outputs(len(chain) - 1)[0]  # the linear stage's output
    native = dict(params)  # what the stage passed to lightgbm.train: objective and seed included
    started = time.perf_counter()
    data = lightgbm.Dataset(chain.matrix[fit], label=chain.y[fit], init_score=offset[fit], free_raw_data=True)
    booster = lightgbm.train(native, data, num_boost_round=rounds)
    raw = offset + booster.predict(chain.matrix, raw_score=True)
    return time.perf_counter() - started, raw


def figures(rows: int, features: int, rounds: int, repeats: int) -> tuple[float, float, float]:
    """Return the best-of (stage seconds, reference seconds), measured in turn, and the largest output difference."""
    frame = common.make_regression_frame(rows, features)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    del frame
    chain.add("linear")
    ours = theirs = float("inf")
    for _ in range(repeats):
        if len(chain) > 1:
            chain.step_back()  # the stream rewinds: the same stage is fit again
        started = time.perf_counter()
        chain.add("lightgbm", params={"n_estimators": rounds})
        ours = min(ours, time.perf_counter() - started)
        seconds, raw = reference(chain, chain.stages[-1].learners[0].params, rounds)
        theirs = min(theirs, seconds)
        gap = float(np.max(np.abs(chain.outputs()[0] - raw)))
        assert gap <= 1e-6, f"the stage and bare LightGBM disagree by {gap:.3g}"
    return ours, theirs, gap


def main() -> None:
    """Print the figure."""
    parse = common.parser(__doc__.splitlines()[0], 1_000_000)
    parse.add_argument("--features", type=int, default=50)
    parse.add_argument("--rounds", type=int, default=100)
    parse.add_argument("--repeats", type=int, default=3, help="measure each side this many times, keep the best")
    args = parse.parse_args()
    ours, theirs, gap = figures(args.rows, args.features, args.rounds, args.repeats)
    common.print_table("lightgbm stage", [
        (f"lightgbm stage ({args.rounds} rounds) after linear, {args.rows:,} x {args.features}",
         f"{ours:.2f} s", f"{theirs:.2f} s (lightgbm.train + predict, init_score)", f"{ours / theirs:.3f} (<= 1.05)"),
        ("largest output difference", f"{gap:.1e}", "0", "(<= 1e-6)"),
    ])


if __name__ == "__main__":
    main()
