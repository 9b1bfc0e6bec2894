"""A recipe fit on a Dask cluster from a Parquet folder, against the same recipe fit in memory.

Method: the data (``common.make_regression_frame``, written in parts of ``--part-rows`` rows by a
separate process) is a folder of Parquet files of ``--rows`` x ``--features`` float64 columns. The
recipe is mean, linear, two lightgbm stages (50 rounds, 31 leaves) and a forest (20 trees, depth 8)
fit on a sample of 200,000 rows, with a 20 % holdout.

- cluster: ``remnant fit RECIPE --cluster local:W`` on the whole folder, in its own process; its
  peak resident size (``ru_maxrss`` of that process: the workers are other processes) and wall time.
- memory: ``remnant fit`` of the same recipe without a cluster on the first ``--memory-rows`` rows
  (one Parquet file), in its own process; its wall time is scaled by rows to the cluster's size.

Each step of the cluster fit (reading the rows, the sample, each stage, each score) also gives its
wall time here, the workers' compute seconds and the bytes they sent (``bench/cluster_probe.py``;
``cluster_steps`` in the JSON).

Target: peak resident size of the fitting process under 1 GiB at 20,000,000 x 20.

    python bench/cluster.py [--rows 20000000] [--memory-rows 5000000] [--workers 2] [--quick]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

GiB = 2**30
RECIPE = """
[data]
path = "{path}"
target = "y"

[chain]
seed = 0

[validation]
fraction = 0.2

[cluster]
sample_rows = 200000

[[stage]]
kind = "mean"

[[stage]]
kind = "linear"

[[stage]]
kind = "lightgbm"
params = {{ n_estimators = 50, num_leaves = 31 }}
repeat = 2

[[stage]]
kind = "forest"
params = {{ n_estimators = 20, max_depth = 8 }}
"""

WRITE = """
import sys, pathlib
sys.path.insert(0, {bench!r})
import common
rows, features, part_rows, folder = {rows}, {features}, {part_rows}, pathlib.Path({folder!r})
folder.mkdir(parents=True, exist_ok=True)
for i, start in enumerate(range(0, rows, part_rows)):
    n = min(part_rows, rows - start)
    common.make_regression_frame(n, features, seed=i).to_parquet(folder / f"part{{i:04d}}.parquet", index=False)
"""

FIT = """
import resource, sys, time
sys.path.insert(0, {bench!r})
import tui.cli
if "--cluster" in sys.argv:
    import cluster_probe
    cluster_probe.install()
started = time.perf_counter()
status = tui.cli.main(sys.argv[1:])
print("FIGURES", status, time.perf_counter() - started, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)
"""


def write_parts(folder: Path, rows: int, features: int, part_rows: int) -> None:
    """Write ``rows`` rows as Parquet parts of ``part_rows`` rows in ``folder``, in another process."""
    code = WRITE.format(bench=str(Path(__file__).resolve().parent), rows=rows, features=features,
                        part_rows=part_rows, folder=str(folder))
    subprocess.run([sys.executable, "-c", code], check=True)


def fit(recipe: Path, out: Path, cluster: str | None) -> dict[str, float]:
    """Run ``remnant fit`` in its own process; return its wall time and peak resident size."""
    argv = ["fit", str(recipe), "--out", str(out)] + (["--cluster", cluster] if cluster else [])
    code = FIT.format(bench=str(Path(__file__).resolve().parent))
    done = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True)
    figures = [line for line in done.stdout.splitlines() if line.startswith("FIGURES")]
    if done.returncode or not figures or figures[0].split()[1] != "0":
        raise SystemExit(f"remnant fit failed:\n{done.stderr[-3000:]}")
    _, _, seconds, peak = figures[0].split()
    probes = [json.loads(line[len("PROBE "):]) for line in done.stdout.splitlines() if line.startswith("PROBE ")]
    table = [line for line in done.stdout.splitlines() if not line.startswith(("FIGURES", "PROBE", "[LightGBM]"))]
    print("\n".join(table[:8]))
    lightgbm_lines = sum(line.startswith("[LightGBM]") for line in done.stderr.splitlines())
    return {"seconds": float(seconds), "peak_bytes": float(peak), "steps": probes, "lightgbm_lines": lightgbm_lines}


def main() -> None:
    """Write the data, fit on the cluster and in memory, print the figures as JSON."""
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=20_000_000)
    parser.add_argument("--memory-rows", type=int, default=5_000_000)
    parser.add_argument("--features", type=int, default=20)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--part-rows", type=int, default=1_000_000)
    parser.add_argument("--quick", action="store_true", help="400,000 rows, 100,000 in memory")
    parser.add_argument("--folder", help="keep the data here, and use it again when it is there "
                                         "(default: a temporary folder)")
    parser.add_argument("--cluster-only", action="store_true", help="skip the in-memory fit")
    args = parser.parse_args()
    if args.quick:
        args.rows, args.memory_rows, args.part_rows = 400_000, 100_000, 100_000
    with tempfile.TemporaryDirectory() as scratch:
        root = Path(args.folder or scratch)
        parts, first = root / "parts", root / "first"
        started = time.perf_counter()
        if not (args.folder and (parts / "part0000.parquet").exists()):  # a kept folder's data is used again
            write_parts(parts, args.rows, args.features, args.part_rows)
            write_parts(first, args.memory_rows, args.features, args.memory_rows)  # the first rows, one file
        written = time.perf_counter() - started
        (root / "cluster.toml").write_text(RECIPE.format(path=parts.as_posix()))
        (root / "memory.toml").write_text(RECIPE.format(path=(first / "part0000.parquet").as_posix()))
        on_cluster = fit(root / "cluster.toml", root / "cluster.chain", f"local:{args.workers}")
        in_memory = {"seconds": float("nan"), "peak_bytes": float("nan")} if args.cluster_only else \
            fit(root / "memory.toml", root / "memory.chain", None)
    scaled = in_memory["seconds"] * args.rows / args.memory_rows
    figures = {
        "machine": common.machine() if hasattr(common, "machine") else os.uname().machine,
        "rows": args.rows, "features": args.features, "workers": args.workers, "data_seconds": round(written, 1),
        "cluster_seconds": round(on_cluster["seconds"], 1),
        "cluster_peak_gib": round(on_cluster["peak_bytes"] / GiB, 3),
        "memory_rows": args.memory_rows, "memory_seconds": round(in_memory["seconds"], 1),
        "memory_peak_gib": round(in_memory["peak_bytes"] / GiB, 3),
        "memory_seconds_scaled": round(scaled, 1), "cluster_over_scaled_memory": round(on_cluster["seconds"] / scaled, 2),
        "peak_under_1_gib": on_cluster["peak_bytes"] < GiB,
        "cluster_steps": on_cluster["steps"], "lightgbm_lines_on_stderr": on_cluster["lightgbm_lines"],
    }
    print(json.dumps(figures, indent=1))


if __name__ == "__main__":
    main()
