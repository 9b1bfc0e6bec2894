"""The workbench's job builders refuse what they do not know."""

from __future__ import annotations

import pytest

from tui import jobs


def test_an_unknown_quick_change_is_refused_not_taken_for_undo():
    with pytest.raises(ValueError, match="no quick change 'redo' \\(one of step back, trim, undo\\)"):
        jobs.quick_change(None, None, None, None, "redo")  # type: ignore[arg-type]
