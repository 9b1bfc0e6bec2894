"""LightGBM's own lines on the workers of a cluster: kept off the terminal, errors kept (imported
only with Dask installed).

LightGBM's native library keeps its log level and log callback per thread. On a Dask worker the
training runs in one of the worker's task threads, where neither has been set yet when LightGBM
starts its network (which it does before it reads the stage's ``verbosity``), so its chatter
("Trying to bind port ...", "Connected to rank ...") is printed to the worker's standard output,
which for a ``local:N`` cluster is this terminal, and for the ``remnant`` command the stage table's
stream. ``QuietDaskLGBMRegressor`` trains through ``QuietLGBMRegressor``, which first builds a
one-row Dataset with ``verbosity = -1`` in the task's own thread: the thread's level is then
LightGBM's fatal level, as the stage's parameters ask. Nothing real is hidden: LightGBM writes a
fatal error to the worker's standard error and raises it (``LightGBMError``), which fails the
stage with its message.

One line escapes that: "Listening..." comes from a thread LightGBM starts itself. The worker
processes of a ``local:N`` cluster (started by ``remnant`` for the run) therefore write their
standard output to the null device (``quiet_local_workers``); their standard error, where Dask
logs and LightGBM writes a fatal error, stays on the terminal.
"""

from __future__ import annotations

import os
from typing import Any

import lightgbm
import numpy as np
from distributed.diagnostics.plugin import WorkerPlugin
from lightgbm.dask import DaskLGBMRegressor


def quiet_this_thread() -> None:
    """Set LightGBM's log level of the calling thread to its fatal level (``verbosity = -1``); return nothing."""
    lightgbm.Dataset(np.zeros((1, 1)), label=np.zeros(1), params={"verbosity": -1}).construct()


class QuietLGBMRegressor(lightgbm.LGBMRegressor):
    """``LGBMRegressor`` whose ``fit`` quiets LightGBM in its own thread first (a worker's part of a
    distributed fit)."""

    def fit(self, *args: Any, **kwargs: Any) -> Any:
        """Quiet this thread's LightGBM, then fit as ``LGBMRegressor`` does; return the fitted model."""
        quiet_this_thread()
        return super().fit(*args, **kwargs)


class QuietDaskLGBMRegressor(DaskLGBMRegressor):
    """``DaskLGBMRegressor`` whose workers train ``QuietLGBMRegressor``: no network chatter on the terminal."""

    def fit(self, X: Any, y: Any, init_score: Any = None, **kwargs: Any) -> Any:  # type: ignore[override]
        """Fit over the cluster as ``DaskLGBMRegressor.fit`` does; return the fitted estimator."""
        self._lgb_dask_fit(model_factory=QuietLGBMRegressor, X=X, y=y, init_score=init_score, **kwargs)
        return self


class NullStandardOutput(WorkerPlugin):
    """A worker plugin: the worker process's standard output (file descriptor 1) goes to the null device."""

    name = "remnant-null-standard-output"

    def setup(self, worker: Any) -> None:
        """Point this worker process's standard output at the null device; return nothing."""
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, 1)
        os.close(null)


def quiet_local_workers(client: Any) -> None:
    """Send the standard output of every worker process of ``client`` (and of any that joins later) to
    the null device; only for worker processes started for this run (``local:N``); return nothing."""
    client.register_plugin(NullStandardOutput())
