"""A headless worker that fits stages one by one and saves the session after each.

Usage::

    python -m stages.files.session_worker DATA TARGET SESSION N

When SESSION already exists the worker resumes it; then it fits stages until the chain has
N, cycling through a few cheap kinds, saves the session after each fit and prints
``saved K`` (K stages in the file), flushed, after each save. It exists so that a test can
kill it (``kill -9``) at any moment and check what the session file kept.
"""

from __future__ import annotations

import os
import sys
from typing import Any

from ..chain import Chain
from ..errors import RemnantError
from .session import load_session, save_session

#: the kinds fit in turn, with small parameters so that each fit takes milliseconds
CYCLE: tuple[tuple[str, float, dict[str, Any]], ...] = (
    ("linear", 1.0, {}),
    ("tree", 0.5, {"max_depth": 2}),
    ("knn", 0.3, {"n_neighbors": 7}),
    ("tree", 0.3, {"max_depth": 3, "min_samples_leaf": 5}),
    ("mean", 0.5, {}),
)


def run(data: str, target: str, session: str, n: int) -> int:
    """Fit stages until the chain has ``n``, saving after each; return the exit status."""
    if os.path.exists(session):
        chain = load_session(session, data)
        print(f"resumed {len(chain)}", flush=True)
    else:
        chain = Chain.from_file(data, target)
    while len(chain) < n:
        kind, shrinkage, params = CYCLE[len(chain) % len(CYCLE)]
        chain.add(kind, shrinkage, params=params)
        save_session(chain, session)
        print(f"saved {len(chain)}", flush=True)
    return 0


def main(argv: list[str] | None = None) -> int:
    """Run the worker on ``argv`` (DATA TARGET SESSION N) and return the exit status."""
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 4 or not args[3].isdigit():
        print("usage: python -m stages.files.session_worker DATA TARGET SESSION N", file=sys.stderr)
        return 2
    try:
        return run(args[0], args[1], args[2], int(args[3]))
    except RemnantError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
