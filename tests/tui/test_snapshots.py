"""Snapshots of the main screens at 80x24 and 120x40: the setup screen, the main screen with the
demo's four stages, the add-stage form, the audition's result (candidates side by side), the
scan's view of the demo after its linear start and the confusion matrix of the multiclass demo.

Timings are hidden (``timings=False``) and the cursor does not blink, so each picture is the
same on every run. Review a changed picture before accepting it with ``--snapshot-update``.
"""

from __future__ import annotations

import pytest
from sklearn.datasets import load_diabetes
from textual.widgets import Input, TextArea

import stages
from tui.app import RemnantApp, build_app
from tui.demo_app import demo_app, demo_folder

SIZES = [(80, 24), (120, 40)]


async def still(pilot) -> None:
    """Wait for every fit and every pane's question, then stop the cursors from blinking."""
    app = pilot.app
    for _ in range(400):  # a generous bound that only catches a hang
        await app.workers.wait_for_complete()
        await pilot.pause()
        if not app.fitting and not app.answering:
            break
    for _ in range(3):
        await pilot.pause()
    for field in app.screen.query(Input):
        field.cursor_blink = False
    await pilot.pause()


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_setup_screen(snap_compare, size):
    app = build_app(data_path=str(demo_folder() / "deliveries.csv"), target="minutes_late", timings=False,
                    sessions=False)
    assert snap_compare(app, terminal_size=size, run_before=still)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_main_screen_with_the_demo_chain(snap_compare, size):
    assert snap_compare(demo_app(timings=False), terminal_size=size, run_before=still)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_add_stage_form(snap_compare, size):
    async def open_form(pilot) -> None:
        await still(pilot)
        await pilot.press("a")
        await still(pilot)

    assert snap_compare(demo_app(timings=False), terminal_size=size, run_before=open_form)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_the_scan_after_the_demo_linear_start(snap_compare, size):
    async def scan(pilot) -> None:
        await still(pilot)
        for key in ("home", "down", "v", "v"):
            await pilot.press(key)
            await still(pilot)

    assert snap_compare(demo_app(timings=False), terminal_size=size, run_before=scan)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_the_confusion_matrix_of_the_multiclass_demo(snap_compare, size):
    async def confusion(pilot) -> None:
        await still(pilot)
        for key in ("v", "v"):
            await pilot.press(key)
            await still(pilot)

    assert snap_compare(demo_app(timings=False, multiclass=True), terminal_size=size, run_before=confusion)


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


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_audition_result_screen(snap_compare, size):
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
    assert snap_compare(app, terminal_size=size, run_before=audition)
