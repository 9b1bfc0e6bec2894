"""Peak memory of a chain over 1,000,000 x 50 float64 rows (400 MB) with 20 stages cached,
against the size of the data in float64.

Method: each case runs in its own Python process. The process first imports the libraries
(numpy, pandas, pyarrow, scikit-learn, LightGBM and every stage kind), reads its peak resident
size (``resource.getrusage(RUSAGE_SELF).ru_maxrss``) as the baseline, then builds the chain
and fits linear + 19 hist_tree stages (depth 4, shrinkage 0.3) with a 20 % holdout. The figure
is the peak resident size minus that baseline, over the fits and what follows them: 5 step
backs in a row, each with the rescored table and the residuals after the stage it lands on
(what the workbench shows next), 10 more 0.3 s apart, 5 undos in a row, and the read of an
older stage's output between checkpoints (each time printed, against the fit time of one
stage in the same run); then a fit right after a trim (which starts a background rebuild the
fit stops) against a fit after the same trim once the rebuild is done. Three cases:

- ``file``: ``Chain.from_file`` on a Parquet file, as a user of the workbench starts;
- ``frame``: ``Chain(frame, ...)`` on a DataFrame the user made in the same process, so the
  user's own frame (400 MB) counts in the peak too; the user deletes it once the chain is built;
- ``kept``: the same, but the user keeps the frame for the whole session.

Target: peak / data size <= 2.5.

    python bench/memory.py [--rows N] [--features N] [--stages N]
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

MiB = 2**20
#: step backs (and undos) in a row as fast as Python calls them, then step backs a user's key presses apart
FAST_STEPS, PACED_STEPS, PACE = 5, 10, 0.3


def peak_bytes() -> int:
    """Return this process's peak resident size in bytes (Linux reports kilobytes)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def resident_bytes() -> int:
    """Return this process's current resident size in bytes."""
    with open("/proc/self/statm") as handle:
        return int(handle.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


def lean_frame(rows: int, features: int, seed: int = 0):
    """Return a frame like ``common.make_regression_frame``, made a column at a time so that making
    it costs no more memory than the frame itself."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(seed)
    columns = {f"x{i}": rng.standard_normal(rows) for i in range(features)}
    x = [columns[f"x{i}"] for i in range(4)]
    columns["y"] = x[0] * 2 + np.sin(x[1] * 2) + (x[2] > 0.5) * x[3] + rng.standard_normal(rows) * 0.5
    return pd.DataFrame(columns, copy=False)


def child(case: str, path: str, rows: int, features: int, n_stages: int) -> dict[str, float]:
    """Build and fit the chain of ``case`` in this process; return its memory figures in MiB."""
    import lightgbm  # noqa: F401
    import pyarrow.parquet  # noqa: F401
    import sklearn.linear_model  # noqa: F401
    import sklearn.tree  # noqa: F401

    import stages
    from stages.kinds import kind_names

    kind_names()  # imports every built-in kind
    base = peak_bytes()
    if base > resident_bytes() + 64 * MiB:
        raise SystemExit("the baseline peak is above the resident size: start this from a small process")
    user_frame = 0
    if case == "file":
        chain = stages.Chain.from_file(path, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    else:
        frame = lean_frame(rows, features)
        user_frame = resident_bytes() - base
        chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    built = peak_bytes()
    if case == "frame":
        del frame  # the chain holds what it needs; whether it keeps the user's frame shows in "held"
    # case "kept": the user keeps the frame for the whole session
    chain.add("linear")
    started = time.perf_counter()
    chain.add("hist_tree", 0.3, params={"max_depth": 4}, repeat=n_stages - 1)
    fit_seconds = time.perf_counter() - started
    figures = {"baseline": base / MiB, "peak_built": (built - base) / MiB, "peak_fits": (peak_bytes() - base) / MiB,
               "held": (resident_bytes() - base) / MiB, "user_frame": user_frame / MiB,
               "stage_fit_ms": fit_seconds / (n_stages - 1) * 1000}
    # a run of step backs, each with the rescored table and the output the residual view reads
    # (the residuals after the stage it lands on), as fast as Python calls them, then as a user
    # presses a key (every 0.3 s); then undo as many times
    figures["step_backs_ms"] = [timed(chain, "step_back") for _ in range(FAST_STEPS)]
    figures["paced_step_backs_ms"] = []
    for _ in range(PACED_STEPS):
        time.sleep(PACE)
        figures["paced_step_backs_ms"].append(timed(chain, "step_back"))
    figures["undos_ms"] = [timed(chain, "undo") for _ in range(FAST_STEPS)]
    chain.wait_for_rebuilds()
    figures["peak_steps"] = (peak_bytes() - base) / MiB
    # an older stage's output, between checkpoints: rebuilt from the checkpoint before it
    row = len(chain) - 3 * chain.checkpoint_every + 5
    started = time.perf_counter()
    chain.outputs(row)[0].sum()
    figures["rebuild_ms"] = (time.perf_counter() - started) * 1000
    figures["peak_read"] = (peak_bytes() - base) / MiB
    # a fit right after a trim to a checkpoint (the fit reads kept outputs; the trim starts a
    # rebuild of the 9 before it, which the fit stops) against a fit after the same trim once
    # that rebuild is done, alternated; after a trim the hist_tree kind builds its booster again
    figures["fit_after_trim_s"], figures["fit_alone_s"] = [], []
    every = chain.checkpoint_every
    for _ in range(5):
        for key, wait in (("fit_alone_s", True), ("fit_after_trim_s", False)):
            chain.trim(max(every, every * (len(chain) // every - 1)))
            if wait:
                chain.wait_for_rebuilds()
            figures[key].append(_fit_seconds(chain))
    figures["held_after"] = (resident_bytes() - base) / MiB
    figures["peak"] = (peak_bytes() - base) / MiB
    return figures


def timed(chain, change: str) -> float:
    """Return the milliseconds ``chain.<change>()`` and then the rescored table and the residuals
    after the last stage (what the workbench shows next) take."""
    started = time.perf_counter()
    getattr(chain, change)()
    chain.table()
    chain.residuals("valid")
    return (time.perf_counter() - started) * 1000


def _fit_seconds(chain) -> float:
    """Return the seconds one more hist_tree stage takes to fit."""
    started = time.perf_counter()
    chain.add("hist_tree", 0.3, params={"max_depth": 4})
    return time.perf_counter() - started


def run_case(case: str, path: str, args) -> dict[str, float]:
    """Return the figures of ``case`` measured in a fresh Python process."""
    command = [sys.executable, __file__, "--child", case, "--path", path, "--rows", str(args.rows),
               "--features", str(args.features), "--stages", str(args.stages)]
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise SystemExit(f"memory case {case!r} failed:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    """Print the figures, or (with --child) measure one case and print it as JSON."""
    parse = common.parser(__doc__.splitlines()[0], 1_000_000)
    parse.add_argument("--features", type=int, default=50)
    parse.add_argument("--stages", type=int, default=20)
    parse.add_argument("--child", choices=("write", "file", "frame", "kept"), help="(internal) run one case")
    parse.add_argument("--path", default="", help="(internal) the Parquet file")
    parse.add_argument("--cases", nargs="*", default=["file", "frame", "kept"], choices=("file", "frame", "kept"),
                       help="the cases to measure (default: all three)")
    args = parse.parse_args()
    if args.child == "write":
        common.make_regression_frame(args.rows, args.features).to_parquet(args.path, index=False)
        print("{}")
        return
    if args.child:
        print(json.dumps(child(args.child, args.path, args.rows, args.features, args.stages)))
        return
    data_mib = args.rows * args.features * 8 / MiB
    with tempfile.TemporaryDirectory() as folder:
        path = os.path.join(folder, "rows.parquet")
        # written by a child too: Linux carries a parent's peak into the ru_maxrss of what it starts
        run_case("write", path, args)
        figures = {case: run_case(case, path, args) for case in args.cases}
    rows = []
    cases = (("file", "from a Parquet file"), ("frame", "from the user's DataFrame (counted), then deleted"),
             ("kept", "from the user's DataFrame (counted), kept"))
    for case, label in cases:
        if case not in figures:
            continue
        got = figures[case]
        rows.append((f"peak, {args.rows:,} x {args.features}, {args.stages} stages, {label}",
                     f"{got['peak']:.0f} MiB", f"{data_mib:.0f} MiB (data in float64)",
                     f"{got['peak'] / data_mib:.2f} (<= 2.5)"))
        rows.append(("  of which: building the chain / held after the fits", f"{got['peak_built']:.0f} MiB",
                     f"{got['held']:.0f} MiB", f"baseline {got['baseline']:.0f} MiB"))
        if case == "kept":  # what the chain itself adds to the user's own frame
            own = got["peak"] - got["user_frame"]
            rows.append(("  the chain's own share (peak less the user's frame)", f"{own:.0f} MiB",
                         f"{got['user_frame']:.0f} MiB (the user's frame)", f"{own / data_mib:.2f}"))
        fit_ms = f"{got['stage_fit_ms']:.0f} ms (fit of a stage)"
        for label, key in ((f"{FAST_STEPS} step backs in a row", "step_backs_ms"),
                           (f"then {PACED_STEPS} more, {PACE} s apart", "paced_step_backs_ms"),
                           (f"then {FAST_STEPS} undos in a row", "undos_ms")):
            times = got[key]
            rows.append((f"  {label}, each with the table and residuals: max (each)", f"{max(times):.1f} ms",
                         fit_ms, f"{max(times) / got['stage_fit_ms']:.2f} (under 100 ms)"))
            rows.append(("    each, ms", " ".join(f"{t:.0f}" for t in times), "", ""))
        rows.append(("  an older stage's output read (rebuilt from the checkpoint before it)",
                     f"{got['rebuild_ms']:.0f} ms", fit_ms, "the trade-off"))
        after, alone = min(got["fit_after_trim_s"]), min(got["fit_alone_s"])
        rows.append(("  a fit right after a trim (stopping its rebuild), best of 5", f"{after:.2f} s",
                     f"{alone:.2f} s, after a trim, the rebuild done", f"{after / alone:.2f}"))
        rows.append(("  peak after: the fits / the step backs and undos / the older read / the last fits",
                     f"{got['peak_fits']:.0f} / {got['peak_steps']:.0f} / {got['peak_read']:.0f} / {got['peak']:.0f} MiB",
                     f"{got['held_after']:.0f} MiB held at the end", ""))
    common.print_table("memory", rows)


if __name__ == "__main__":
    main()
