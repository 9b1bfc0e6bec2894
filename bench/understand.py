"""The residual scan and partial dependence on 1,000,000 x 50, against one ``hist_tree`` stage's fit.

A chain of a ``linear`` stage then one ``hist_tree`` stage (depth 6) on 20 % holdout; the
figures are the scan of every feature (20 bins, 20 shuffles for the noise band) and the partial
dependence of one feature (20 grid values, the whole fitting part averaged; the chain has both
stages to predict), each over all rows and over a bounded sample as the workbench would ask,
timed against the fit of the ``hist_tree`` stage measured in the same run. The scan must find
the features that carry the data's signal after the linear stage (x1's sine, x2 and x3's step).

    python bench/understand.py [--rows N] [--features N] [--sample N]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402


def timed(fn) -> tuple[float, object]:
    """Return the seconds ``fn()`` took and what it returned."""
    started = time.perf_counter()
    result = fn()
    return time.perf_counter() - started, result


def main() -> None:
    """Print the figures."""
    parse = common.parser(__doc__.splitlines()[0], 1_000_000)
    parse.add_argument("--features", type=int, default=50)
    parse.add_argument("--sample", type=int, default=100_000, help="rows of the bounded runs (default 100,000)")
    args = parse.parse_args()
    frame = common.make_regression_frame(args.rows, args.features)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    del frame
    chain.add("linear")
    fit_s, _ = timed(lambda: chain.add("hist_tree", 1.0, params={"max_depth": 6}))
    scan_before_s, scan = timed(lambda: chain.residual_scan(upto=1))
    top = set(scan["feature"][:3])
    if not {"x1", "x2", "x3"} & top:
        raise SystemExit(f"the scan did not find the signal: top features {sorted(top)}")
    scan_s, _ = timed(lambda: chain.residual_scan())
    sampled_scan_s, _ = timed(lambda: chain.residual_scan(sample=args.sample))
    dependence_s, _ = timed(lambda: chain.partial_dependence("x1"))
    sampled_dependence_s, _ = timed(lambda: chain.partial_dependence("x1", sample=args.sample))
    size = f"{args.rows:,} x {args.features}"
    n_fit, n_valid = chain.layout.n_train, chain.layout.n_valid
    reference = f"{fit_s:.2f} s (hist_tree fit)"
    common.print_table(f"the scan and partial dependence against one hist_tree stage, {size}", [
        (f"residual scan after the linear stage ({n_fit:,} fit, {n_valid:,} scored rows)", f"{scan_before_s:.2f} s",
         reference, f"{scan_before_s / fit_s:.2f}x the fit"),
        ("  after the hist_tree stage", f"{scan_s:.2f} s", reference, f"{scan_s / fit_s:.2f}x the fit"),
        (f"  on a sample of {args.sample:,} fit and scored rows", f"{sampled_scan_s:.2f} s", reference,
         f"{sampled_scan_s / fit_s:.2f}x the fit"),
        (f"partial dependence of x1, 20 values, {n_fit:,} rows", f"{dependence_s:.2f} s", reference,
         f"{dependence_s / fit_s:.2f}x the fit"),
        (f"  on a sample of {args.sample:,} rows", f"{sampled_dependence_s:.2f} s", reference,
         f"{sampled_dependence_s / fit_s:.2f}x the fit"),
    ])


if __name__ == "__main__":
    main()
