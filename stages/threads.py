"""Threads on a shared machine: how many cores this process may use, and how a fit's threads are set.

A learner that starts one thread per core the machine has (LightGBM's and OpenMP's default)
oversubscribes a process that is limited to fewer: by CPU affinity (``taskset``, a batch
scheduler) or by a container's CPU quota (cgroup ``cpu.max``, or ``cpu.cfs_quota_us`` under
cgroup v1). The threads then wait for one another at every barrier. ``usable_cores`` counts
what this process may really run on, and every kind's thread default (``num_threads`` /
``n_jobs`` left unset) takes the chain's ``threads``, which defaults to it.

OpenMP's waiting threads spin by default; ``stages/__init__.py`` asks for sleeping waits
(``OMP_WAIT_POLICY=PASSIVE``) before any OpenMP runtime starts, unless the user set it.
"""

from __future__ import annotations

import functools
import math
import os
from pathlib import Path

from .errors import StageSpecError

#: the most threads a chain may be given (far above any machine's cores; a typo guard)
MAX_THREADS = 1024

_CGROUP_ROOT = Path("/sys/fs/cgroup")


def _affinity_cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def _read(path: Path) -> str | None:
    try:
        return path.read_text(encoding="ascii").strip()
    except (OSError, UnicodeDecodeError):
        return None


def _own_cgroup_dirs(root: Path) -> list[Path]:
    """Return this process's cgroup folders (its own and the mount root), most specific first."""
    found: list[Path] = []
    text = _read(Path("/proc/self/cgroup")) or ""
    for line in text.splitlines():
        parts = line.split(":", 2)
        if len(parts) == 3 and parts[2].startswith("/"):
            for base in (root, root / "cpu", root / "cpu,cpuacct"):
                found.append(base / parts[2].lstrip("/"))
    found += [root, root / "cpu", root / "cpu,cpuacct"]
    return found


def quota_cores(root: Path = _CGROUP_ROOT) -> float | None:
    """Return the CPU quota of this process's cgroup in cores (quota over period), or None without one.

    cgroup v2 writes ``cpu.max`` as ``"<quota> <period>"`` (``max`` for no quota); cgroup v1
    writes ``cpu.cfs_quota_us`` (-1 for none) and ``cpu.cfs_period_us``.
    """
    for folder in _own_cgroup_dirs(root):
        v2 = _read(folder / "cpu.max")
        if v2 is not None:
            fields = v2.split()
            if len(fields) == 2 and fields[0] != "max":
                return _ratio(fields[0], fields[1])
            return None
        quota, period = _read(folder / "cpu.cfs_quota_us"), _read(folder / "cpu.cfs_period_us")
        if quota is not None and period is not None:
            return _ratio(quota, period)
    return None


def _ratio(quota: str, period: str) -> float | None:
    try:
        q, p = int(quota), int(period)
    except ValueError:
        return None
    return q / p if q > 0 and p > 0 else None


@functools.lru_cache(maxsize=1)
def _own_quota() -> float | None:
    # a process's cgroup quota is set from outside and rarely changes: read it once, not once a stage
    return quota_cores()


def usable_cores() -> int:
    """Return the cores this process may use: its CPU affinity, capped by its cgroup's CPU quota
    (read once per process; rounded up: a quota of 1.5 cores keeps two threads busy), at least 1."""
    cores = _affinity_cores()
    quota = _own_quota()
    if quota is not None:
        cores = min(cores, max(1, math.ceil(quota)))
    return max(1, cores)


def check_threads(value: object, where: str = "threads") -> int | None:
    """Return ``value`` as a thread count (None: the usable cores); raise StageSpecError unless it is
    a whole number from 1 to MAX_THREADS or None."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_THREADS:
        raise StageSpecError(f"{where} must be a whole number from 1 to {MAX_THREADS:,}, not {value!r}")
    return int(value)


def resolve(threads: int | None) -> int:
    """Return the thread count a fit uses: ``threads``, or the usable cores when it is None."""
    return usable_cores() if threads is None else int(threads)


def share(threads: int | None, workers: int) -> tuple[int, int]:
    """Return (workers, threads per worker) for ``workers`` fits side by side on ``threads`` cores:
    never more workers than cores, and workers times threads per worker never above the cores."""
    cores = resolve(threads)
    workers = max(1, min(workers, cores))
    return workers, max(1, cores // workers)
