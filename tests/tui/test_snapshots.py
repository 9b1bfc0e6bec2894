"""Snapshots of the setup screen, the main screen with the demo's four stages, and the add-stage form.

Timings are hidden (``timings=False``) and the cursor does not blink, so each picture is the
same on every run. Review a changed picture before accepting it with ``--snapshot-update``.
"""

from __future__ import annotations

from textual.widgets import Input

from tui.app import build_app
from tui.demo_app import demo_app, demo_folder

SIZE = (80, 24)


async def still(pilot) -> None:
    """Wait for every fit, then stop the cursors from blinking."""
    await pilot.app.workers.wait_for_complete()
    for _ in range(3):
        await pilot.pause()
    for field in pilot.app.screen.query(Input):
        field.cursor_blink = False
    await pilot.pause()


def test_setup_screen(snap_compare):
    app = build_app(data_path=str(demo_folder() / "deliveries.csv"), target="minutes_late", timings=False)
    assert snap_compare(app, terminal_size=SIZE, run_before=still)


def test_main_screen_with_the_demo_chain(snap_compare):
    assert snap_compare(demo_app(timings=False), terminal_size=SIZE, run_before=still)


def test_add_stage_form(snap_compare):
    async def open_form(pilot) -> None:
        await still(pilot)
        await pilot.press("a")
        await still(pilot)

    assert snap_compare(demo_app(timings=False), terminal_size=SIZE, run_before=open_form)
