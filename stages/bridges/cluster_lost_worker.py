"""A worker lost during LightGBM's training on a cluster: the stage fails within seconds, and a later
stage fails at once with what to do, instead of waiting for ever.

``lightgbm.dask`` pins each worker's part of the training to that worker, so Dask cannot retry it:
the lost worker's part waits for a worker that will not come back, and ``lightgbm.dask`` waits for
every part. ``training_guard`` watches the scheduler's workers while a stage trains: when one goes,
it cancels the training tasks, so the fit raises at once, and raises ``ClusterError`` naming the
worker. The training threads of the workers left may still wait on their lost peer inside
LightGBM's native code (seen for minutes past its socket time-out), holding each worker's only
thread, and no one can stop them from outside but a restart of the worker; every later task on
such a worker would wait behind them. So those workers are remembered, and a later stage on the
same client (``check_workers_free``) raises ``ClusterError`` saying to restart them; once they are
restarted (new addresses) the chain goes on. Dask is imported here only with the cluster extra.
"""

from __future__ import annotations

import contextlib
import logging
import threading
import weakref
from collections.abc import Iterator
from typing import Any

from .cluster_rows import ClusterError

log = logging.getLogger(f"remnant.{__name__}")
#: seconds between two looks at the scheduler's workers while a stage trains
POLL_SECONDS = 0.5
#: per client, the workers whose LightGBM training threads may still wait on a lost peer
_HELD: weakref.WeakKeyDictionary[Any, set[str]] = weakref.WeakKeyDictionary()


def _workers(client: Any) -> set[str]:
    return set(client.scheduler_info(n_workers=-1)["workers"])


def _training_running(client: Any) -> set[str]:
    """Return the workers of ``client`` still processing a LightGBM training task (``_train_part``)."""
    return {str(worker) for worker, keys in client.processing().items()
            if any("_train_part" in str(key) for key in keys)}


def _cancel_training(client: Any) -> None:
    """Cancel the LightGBM training tasks this client holds (``lightgbm.dask``'s ``_train_part``)."""
    from distributed import Future

    keys = [key for key in list(client.futures) if "_train_part" in str(key)]
    if keys:
        client.cancel([Future(key, client) for key in keys], force=True)


@contextlib.contextmanager
def training_guard(client: Any, what: str) -> Iterator[None]:
    """Run the block (a LightGBM fit over ``client``'s workers); when a worker is lost meanwhile, cancel the
    training, restart the workers that took part, and raise ClusterError naming the worker (``what``
    names the fit in the log)."""
    before = _workers(client)
    lost: list[str] = []
    done = threading.Event()

    def watch() -> None:
        while not done.wait(POLL_SECONDS):
            try:
                gone = before - _workers(client)
            except Exception:  # the client is closing: nothing to watch
                return
            if gone:
                lost.extend(sorted(gone))
                log.warning("%s: worker(s) lost during training: %s", what, ", ".join(lost))
                with contextlib.suppress(Exception):
                    _cancel_training(client)
                return

    watcher = threading.Thread(target=watch, name="remnant-training-guard", daemon=True)
    watcher.start()
    failed: BaseException | None = None
    try:
        yield
    except BaseException as exc:  # noqa: BLE001 - looked at below, then raised again
        failed = exc
    finally:
        done.set()
        watcher.join()
    if failed is not None and not lost:
        gone = before - _workers(client)  # lost as the fit failed, before the watcher looked
        lost.extend(sorted(gone))
    if lost:
        _HELD.setdefault(client, set()).update(before - set(lost))
        raise ClusterError(f"worker {lost[0]} was lost during LightGBM's training, which Dask cannot "
                           "retry; the stage is not fit and the chain is as it was") from failed
    if failed is not None:
        raise failed


def check_workers_free(client: Any) -> None:
    """Raise ClusterError when a worker of ``client`` may still run the training of a stage that lost a
    peer (``training_guard``); return nothing when none is left (restarted workers have new addresses)."""
    busy = _training_running(client)
    if busy:  # a worker's one thread still runs an earlier training: a new one would wait for it for ever
        raise ClusterError(f"worker(s) {', '.join(sorted(busy))} still run the LightGBM training of an earlier "
                           "stage, which only a restart stops: restart them (client.restart_workers) or fit on a "
                           "fresh cluster; the chain is as it was")
    held = _HELD.get(client)
    if not held:
        return
    held &= _workers(client)
    if held:
        raise ClusterError(f"worker(s) {', '.join(sorted(held))} may still be running the LightGBM training of a "
                           "stage that lost a worker, which only a restart stops: restart them "
                           "(client.restart_workers) or fit on a fresh cluster; the chain is as it was")
