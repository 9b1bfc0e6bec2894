"""The workbench's help names the log file the run writes."""

from __future__ import annotations

from pathlib import Path

from textual.widgets import Static
from tui_support import diabetes_csv, setup_app

from tui.screens.help import HelpScreen


async def test_help_names_the_log_file(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    app.log_file = Path(tmp_path / "logs" / "remnant.log")
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        text = str(app.screen.query_one(Static).render())
        assert f"log file (what each action did, and the cause of any failure): {app.log_file}" in text
