"""Shared pieces of the benchmarks: synthetic data, timing, and printing a table of figures."""

from __future__ import annotations

import argparse
import json
import os
import platform
import time
from collections.abc import Callable

import numpy as np
import pandas as pd


def make_regression_frame(rows: int, features: int, seed: int = 0) -> pd.DataFrame:
    """Return a frame of ``rows`` x ``features`` float64 columns and a nonlinear target ``y``."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((rows, features))
    y = X[:, 0] * 2 + np.sin(X[:, 1] * 2) + (X[:, 2] > 0.5) * X[:, 3] + rng.standard_normal(rows) * 0.5
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(features)])
    frame["y"] = y
    return frame


def best_of(fn: Callable[[], object], repeats: int = 1) -> float:
    """Return the fastest wall time of ``repeats`` calls of ``fn``, in seconds."""
    best = float("inf")
    for _ in range(repeats):
        started = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - started)
    return best


def parser(description: str, rows: int) -> argparse.ArgumentParser:
    """Return an argument parser with the shared ``--rows`` option (default ``rows``)."""
    parse = argparse.ArgumentParser(description=description)
    parse.add_argument("--rows", type=int, default=rows, help=f"rows of synthetic data (default {rows:,})")
    return parse


def machine() -> str:
    """Return a one-line description of this machine: cores and memory."""
    try:
        pages = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        memory = f"{pages / 2**30:.0f} GiB"
    except (ValueError, OSError):
        memory = "unknown memory"
    return f"{os.cpu_count()} cores, {memory}, {platform.machine()}, Python {platform.python_version()}"


def load() -> str:
    """Return the machine's load average over the last minute, as a short note."""
    try:
        return f"load {os.getloadavg()[0]:.1f}"
    except OSError:
        return "load unknown"


#: when set, print_table also appends its rows, one JSON line each, to the file it names
RESULTS_ENV = "REMNANT_BENCH_RESULTS"


def print_table(title: str, rows: list[tuple[str, str, str, str]]) -> None:
    """Print figure rows (figure, ours, reference, ratio/target) as an aligned table."""
    results = os.environ.get(RESULTS_ENV)
    if results:
        with open(results, "a", encoding="utf-8") as handle:
            for row in rows:
                handle.write(json.dumps({"title": title, "row": [str(cell) for cell in row]}) + "\n")
    print(f"# {title}  ({machine()}; {load()} at the end)")
    header = ("figure", "ours", "reference", "ratio (target)")
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(4)]
    for row in [header, *rows]:
        print("  ".join(str(cell).ljust(width) for cell, width in zip(row, widths, strict=True)))
