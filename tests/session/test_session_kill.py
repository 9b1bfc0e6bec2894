"""Killing the process at any moment loses at most the fit in progress, and never the session file.

A headless worker (``python -m stages.files.session_worker``) fits 20 stages one by one, saving the
session after each and printing ``saved K``. The test kills it with SIGKILL a seeded random
moment after a seeded random ``saved K`` line, checks the file, restarts the worker (which
resumes the session), and repeats until a worker finishes. At the end the chain must equal,
bit for bit, the chain fitted in one go without any kill.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes

import stages
from stages.files.session import load_session
from stages.files.session_worker import CYCLE

FITS = 20
KILLS = 4

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL (POSIX)")


def start_worker(data: Path, session: Path) -> subprocess.Popen:
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    return subprocess.Popen([sys.executable, "-m", "stages.files.session_worker", str(data), "target", str(session),
                             str(FITS)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)


def run_until_killed(worker: subprocess.Popen, kill_after: int, delay: float) -> int:
    """Kill ``worker`` ``delay`` seconds after it reports ``saved kill_after``; return the last K it
    reported before it died (lines printed while the test slept are read after the kill)."""
    reported = 0
    for line in worker.stdout:
        if line.startswith("saved "):
            reported = int(line.split()[1])
            if reported >= kill_after:
                time.sleep(delay)
                os.kill(worker.pid, signal.SIGKILL)
                break
    for line in worker.stdout:
        if line.startswith("saved "):
            reported = int(line.split()[1])
    worker.wait(timeout=60)
    return reported


def check_session(session: Path, data: Path, reported: int) -> stages.Chain:
    """Assert the session loads and holds every stage reported saved, and at most one more."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        chain = load_session(session, data)
    assert reported <= len(chain) <= reported + 1  # a save can finish just before its line is read
    expected = [CYCLE[i % len(CYCLE)][0] for i in range(len(chain))]
    assert [spec.kind for spec in chain.specs()] == expected
    return chain


def test_kill_9_at_random_moments_loses_at_most_the_fit_in_progress(tmp_path):
    data = tmp_path / "diabetes.csv"
    load_diabetes(as_frame=True).frame.iloc[:200].to_csv(data, index=False)
    session = tmp_path / "sessions" / "diabetes.session"
    chooser = random.Random(20240601)
    kept = 0
    confirmed, leftovers = [], 0
    for _ in range(KILLS):
        kill_after = min(FITS - 1, kept + chooser.randint(1, 4))
        with start_worker(data, session) as worker:
            reported = run_until_killed(worker, kill_after, chooser.uniform(0.0, 0.03))
            assert worker.returncode == -signal.SIGKILL, worker.stderr.read()
        leftovers += len(list(session.parent.glob(".*.tmp")))  # a kill inside a save leaves one; the file is intact
        kept = len(check_session(session, data, reported))
        confirmed.append((reported, kept))
    with start_worker(data, session) as worker:
        out, err = worker.communicate(timeout=120)
    assert worker.returncode == 0, err
    assert out.splitlines()[0] == f"resumed {kept}" and out.splitlines()[-1] == f"saved {FITS}"
    assert not list(session.parent.glob(".*.tmp"))  # the next save cleared what the kills left
    resumed = check_session(session, data, FITS)
    # the reference: the same 20 stages fitted in one process without any kill
    straight = stages.Chain.from_file(data, "target")
    for i in range(FITS):
        kind, shrinkage, params = CYCLE[i % len(CYCLE)]
        straight.add(kind, shrinkage, params=params)
    for a, b in zip(straight.stages, resumed.stages, strict=True):
        assert all(np.array_equal(x, y) for x, y in zip(a.outputs, b.outputs, strict=True))
    pd.testing.assert_frame_equal(straight.table().drop(columns="seconds"), resumed.table().drop(columns="seconds"))
    print(f"kills={KILLS} (reported saved, stages in file)={confirmed} temp files left by kills={leftovers}")
