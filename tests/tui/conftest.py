"""Fixtures of the workbench tests: every test gets its own session folder (REMNANT_HOME)."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch) -> Path:
    """Point REMNANT_HOME at a fresh folder, so no test reads or replaces the user's sessions."""
    folder = tmp_path / "home"
    monkeypatch.setenv("REMNANT_HOME", str(folder))
    return folder
