"""Run every benchmark of the suite, each in its own process, and print a Markdown table of all figures.

    python bench/run_all.py            # the full sizes (about 17 minutes on 2 cores)
    python bench/run_all.py --quick    # small sizes: under 5 minutes on 2 cores
    python bench/run_all.py --only predict memory
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

HERE = Path(__file__).resolve().parent

#: script -> (full-size arguments, quick arguments)
SUITE: dict[str, tuple[list[str], list[str]]] = {
    "tree_stages": ([], ["--rows", "10000", "--repeats", "2"]),
    "multiclass_stages": ([], ["--rows", "2000", "--stages", "20", "--repeats", "2"]),
    "lightgbm_stage": ([], ["--rows", "100000"]),
    "chain_overhead": ([], ["--rows", "10000", "--wide-rows", "200000", "--repeats", "1"]),
    "predict": ([], ["--rows", "200000", "--fit-rows", "20000", "--repeats", "3"]),
    "memory": ([], ["--rows", "500000"]),
    "cli_help": ([], []),
    "first_screen": ([], ["--repeats", "1"]),
    "hist_tree": ([], ["--rows", "200000"]),
    "big": ([], ["--rows", "500000"]),
    "audition": ([], ["--rows", "20000", "--repeats", "1"]),
    "many_stages": ([], ["--rows", "20000", "--repeats", "1", "--tree-rows", "5000"]),
    "ui_latency": ([], ["--rows", "100000", "--rounds", "50"]),
    "understand": ([], ["--rows", "200000", "--sample", "50000"]),
    "onnx_predict": ([], ["--rows", "100000", "--fit-rows", "20000", "--repeats", "2"]),
}


def markdown(results: Path) -> str:
    """Return the collected figure rows as a Markdown table."""
    lines = ["| benchmark | figure | ours | reference | ratio (target) |", "|---|---|---|---|---|"]
    if results.exists():
        for line in results.read_text(encoding="utf-8").splitlines():
            entry = json.loads(line)
            cells = [entry["title"], *(cell.replace("|", "/") for cell in entry["row"])]
            lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def main() -> None:
    """Run the suite and print every table, then the Markdown summary."""
    parse = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parse.add_argument("--quick", action="store_true", help="small sizes (under 5 minutes on 2 cores)")
    parse.add_argument("--only", nargs="*", choices=sorted(SUITE), help="run only these benchmarks")
    args = parse.parse_args()
    failed = []
    with tempfile.TemporaryDirectory() as folder:
        results = Path(folder) / "results.jsonl"
        env = {**os.environ, common.RESULTS_ENV: str(results)}
        started = time.perf_counter()
        for name, (full, quick) in SUITE.items():
            if args.only and name not in args.only:
                continue
            command = [sys.executable, str(HERE / f"{name}.py"), *(quick if args.quick else full)]
            print(f"$ {' '.join(command[1:])}", flush=True)
            if subprocess.run(command, env=env, check=False).returncode != 0:
                failed.append(name)
            print(flush=True)
        size = "quick sizes" if args.quick else "full sizes"
        print(f"## figures, {size}: {common.machine()}, {datetime.datetime.now(datetime.UTC):%Y-%m-%d}, "
              f"{time.perf_counter() - started:.0f} s in all\n")
        print(markdown(results))
    if failed:
        raise SystemExit(f"failed: {', '.join(failed)}")


if __name__ == "__main__":
    main()
