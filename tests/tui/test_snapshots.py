"""Snapshots of the setup screen, the main screen with the demo's four stages, the add-stage form and
the audition's result (candidates side by side).

Timings are hidden (``timings=False``) and the cursor does not blink, so each picture is the
same on every run. Review a changed picture before accepting it with ``--snapshot-update``.
"""

from __future__ import annotations

from sklearn.datasets import load_diabetes
from textual.widgets import Input, TextArea

import stages
from tui.app import RemnantApp, build_app
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


CANDIDATES = """\
[[candidate]]
kind = "tree"
shrinkage = 0.5
params = { max_depth = [2, 3] }

[[candidate]]
kind = "spline"
shrinkage = 0.5

[[candidate]]
kind = "knn"
shrinkage = 0.5
"""


def test_audition_result_screen(snap_compare):
    # scikit-learn's diabetes data, one linear stage; timings hidden, so the picture never changes
    chain = stages.Chain(load_diabetes(as_frame=True).frame, "target", stages.Holdout(fraction=0.2, seed=0))
    chain.add("linear")

    async def audition(pilot) -> None:
        await still(pilot)
        await pilot.press("n")
        await pilot.pause()
        pilot.app.screen.query_one("#candidates", TextArea).text = CANDIDATES
        await pilot.press("ctrl+r")
        await still(pilot)

    app = RemnantApp(chain=chain, timings=False)
    assert snap_compare(app, terminal_size=SIZE, run_before=audition)
