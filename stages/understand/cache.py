"""Answers cached per chain state: asked again with the same stages, a question is not recomputed.

A chain state is the sequence of stage objects up to the row asked about. Stages are never
changed in place (a refit makes new ones), so an entry stays valid exactly while the same
stage objects are in the same places; entries hold only weak references to the stages, so a
stage that was dropped is not kept alive by the cache. Each chain keeps its most recent
``MAX_ENTRIES`` answers.
"""

from __future__ import annotations

import threading
import weakref
from collections import OrderedDict
from collections.abc import Callable, Hashable, Sequence
from typing import Any, TypeVar

import pandas as pd

MAX_ENTRIES = 64
T = TypeVar("T")

_lock = threading.Lock()
_by_chain: weakref.WeakKeyDictionary[Any, OrderedDict] = weakref.WeakKeyDictionary()


def remembered(chain: Any, stages: Sequence[Any], question: Hashable, compute: Callable[[], T]) -> T:
    """Return ``compute()`` for ``question`` about ``chain`` in the state ``stages``, computed once
    per state (a DataFrame answer is copied, so a caller's edits do not reach the cache)."""
    key = (question, tuple(id(s) for s in stages))
    with _lock:
        entries = _by_chain.setdefault(chain, OrderedDict())
        found = entries.get(key)
        if found is not None and all(ref() is stage for ref, stage in zip(found[0], stages, strict=True)):
            entries.move_to_end(key)
            return _copy(found[1])
    answer = compute()
    with _lock:
        entries = _by_chain.setdefault(chain, OrderedDict())
        entries[key] = (tuple(weakref.ref(s) for s in stages), answer)
        while len(entries) > MAX_ENTRIES:
            entries.popitem(last=False)
    return _copy(answer)


def forget(chain: Any) -> None:
    """Drop every cached answer about ``chain``."""
    with _lock:
        _by_chain.pop(chain, None)


def _copy(answer: T) -> T:
    if isinstance(answer, pd.DataFrame):
        copied = answer.copy()
        copied.attrs = dict(answer.attrs)
        return copied
    return answer
