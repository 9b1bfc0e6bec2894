"""The forms read a stage with the engine's reader: a mistake is refused in the words a recipe uses,
beside the field that holds it."""

from __future__ import annotations

import pytest
from tui_support import add_stage, diabetes_csv, setup_app, start_chain

from stages.errors import StageSpecError
from stages.spec import StageSpec
from tui.screens.add_stage import AddStageScreen
from tui.screens.grow_form import GrowForm


def engine_says(shrinkage: float) -> str:
    """Return the engine's one line for a stage with ``shrinkage``."""
    with pytest.raises(StageSpecError) as caught:
        StageSpec("tree", shrinkage)
    return str(caught.value)


async def test_the_add_stage_form_refuses_a_shrinkage_in_the_engines_words_at_its_field(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await add_stage(pilot, "linear", shrinkage=1.5, wait=False)
        await pilot.pause()
        form = app.screen
        assert isinstance(form, AddStageScreen)
        assert str(form.query_one("#add-error").render()) == engine_says(1.5)
        assert form.focused is form.query_one("#shrinkage")


async def test_the_grow_form_refuses_a_shrinkage_in_the_engines_words_at_its_field(tmp_path):
    app = setup_app(diabetes_csv(tmp_path))
    async with app.run_test(size=(80, 24)) as pilot:
        await start_chain(pilot)
        await pilot.press("g")
        await pilot.pause()
        form = app.screen
        assert isinstance(form, GrowForm)
        form.query_one("#grow-shrinkage").value = "0"
        form.query_one("#grow-max").focus()
        await pilot.press("enter")
        await pilot.pause()
        assert str(form.query_one("#grow-error").render()) == engine_says(0.0)
        assert form.focused is form.query_one("#grow-shrinkage")
