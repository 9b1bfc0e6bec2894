"""How the workbench starts: on a data file, a recipe or a chain file; bad input is one error line and status 2."""

from __future__ import annotations

import textwrap

import numpy as np
from tui_support import diabetes_csv, settle

import stages
from tui.app import build_app, run
from tui.screens.inspect import InspectScreen
from tui.screens.workbench import WorkbenchScreen
from tui.widgets.chain_table import ChainTable

RECIPE = """\
[data]
path = "diabetes.csv"
target = "progression"
ignore = ["patient"]

[chain]
loss = "squared"
seed = 0

[validation]
scheme = "holdout"
fraction = 0.2

[[stage]]
kind = "linear"

[[stage]]
kind = "tree"
shrinkage = 0.5
repeat = 2
params = { max_depth = 2 }
"""


def test_a_missing_file_is_one_error_line_and_status_2(tmp_path, capsys):
    assert run(data_path=str(tmp_path / "nowhere.csv")) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: nowhere.csv: no such file") and err.count("\n") == 1


def test_a_wrong_target_names_the_closest_column(tmp_path, capsys):
    assert run(data_path=str(diabetes_csv(tmp_path)), target="progresion") == 2
    assert "did you mean 'progression'?" in capsys.readouterr().err


def test_a_recipe_whose_data_is_missing_is_refused_before_the_screen(tmp_path, capsys):
    recipe = tmp_path / "diabetes.toml"
    recipe.write_text(RECIPE)
    assert run(recipe_path=str(recipe)) == 2
    assert "diabetes.csv: no such file" in capsys.readouterr().err


async def test_a_recipe_grows_stage_by_stage_into_the_same_chain(tmp_path):
    diabetes_csv(tmp_path)
    recipe = tmp_path / "diabetes.toml"
    recipe.write_text(textwrap.dedent(RECIPE))
    app = build_app(recipe_path=str(recipe), timings=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        screen = app.screen
        assert isinstance(screen, WorkbenchScreen)
        assert [r.kind for r in screen.view.rows] == ["start", "linear", "tree", "tree"]
        assert "fitted the recipe diabetes.toml" in str(screen.query_one("#result").render())
        shown = [r.valid for r in screen.view.rows]
    # reference: the engine's own replay of the recipe, all stages in one call
    replayed = stages.fit_recipe(recipe).table()
    np.testing.assert_allclose(shown, replayed["valid_rmse"], rtol=1e-12)


async def test_a_chain_file_opens_read_only_on_its_own(tmp_path):
    chain = stages.Chain.from_file(diabetes_csv(tmp_path), "progression", stages.Holdout(fraction=0.2, seed=0),
                                   ignore=["patient"])
    chain.add("linear")
    chain.add("lightgbm", 0.5, params={"n_estimators": 10})
    chain.save(tmp_path / "diabetes.chain")
    app = build_app(chain_path=str(tmp_path / "diabetes.chain"), timings=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        screen = app.screen
        assert isinstance(screen, InspectScreen)
        assert screen.query_one(ChainTable).row_count == 3
        np.testing.assert_allclose([r.valid for r in screen.view.rows], chain.table()["valid_rmse"], rtol=1e-12)
        details = screen.query_one("#details-body").render()
        assert "lightgbm" in str(details) and "importance" in str(details)
        offered = {b.binding.action for b in app.active_bindings.values() if b.enabled and b.binding.show}
        assert "close" not in offered and "quit" in offered
        await pilot.press("b")
        assert app.screen is screen  # nothing to go back to
        await pilot.press("q")
    assert app.return_code == 0


async def test_once_the_chain_is_built_the_app_no_longer_holds_the_data_it_read(tmp_path):
    # The chain keeps its own matrix; the frame read for the setup screen would be a second copy
    # of the data for the whole session if the app, the setup screen or the finished job kept it.
    import gc
    import weakref

    from tui_support import setup_app, start_chain

    app = setup_app(diabetes_csv(tmp_path))
    frame = weakref.ref(app.start["frame"])
    async with app.run_test(size=(140, 45)) as pilot:
        await pilot.pause()
        await start_chain(pilot)
        assert isinstance(app.screen, WorkbenchScreen)
        gc.collect()
        assert frame() is None
