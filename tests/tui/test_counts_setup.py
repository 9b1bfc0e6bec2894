"""The workbench on a count target: the setup screen's loss, exposure, power and weight, and the
residual views' deviance residuals.

Data: the RAND Health Insurance Experiment sample shipped with statsmodels
(statsmodels.datasets.randhie): ``mdvis`` counts outpatient visits; exp(lncoins), a positive
column of its own, stands in as the exposure and 1 + physlm as a weight.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from statsmodels.datasets import randhie
from textual.widgets import Input, Select
from tui_support import add_stage, settle, setup_app

from tui.screens.setup import SetupScreen
from tui.widgets.residual_pane import ResidualPane


def visits_csv(folder: Path, rows: int = 600) -> Path:
    data = randhie.load_pandas().data.iloc[:rows].reset_index(drop=True)
    frame = data[["idp", "lpi", "fmde", "physlm", "disea", "mdvis"]].copy()
    frame["coins"] = np.exp(data["lncoins"]).round(6)
    frame["w"] = 1.0 + data["physlm"]
    path = folder / "visits.csv"
    frame.to_csv(path, index=False)
    return path


async def test_the_setup_screen_offers_loss_exposure_power_and_weight_and_starts_a_count_chain(tmp_path):
    app = setup_app(visits_csv(tmp_path), target="mdvis")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        screen = app.screen
        assert isinstance(screen, SetupScreen)
        loss = screen.query_one("#loss", Select)
        options = {v for _, v in loss._options if v != Select.NULL}
        assert {"squared", "poisson", "gamma", "tweedie"} <= options
        assert not screen.query_one("#row-exposure").display and not screen.query_one("#row-power").display
        loss.value = "tweedie"
        await pilot.pause()
        assert screen.query_one("#row-exposure").display and screen.query_one("#row-power").display
        screen.query_one("#power", Input).value = "2.5"
        await pilot.press("ctrl+s")
        await pilot.pause()
        assert "power must be strictly between 1 and 2" in str(screen.query_one("#setup-state").render())
        app.pop_screen()  # the failure modal
        await pilot.pause()
        loss.value = "poisson"
        await pilot.pause()
        assert not screen.query_one("#row-power").display
        screen.query_one("#exposure", Select).value = "coins"
        screen.query_one("#weight", Select).value = "w"
        await pilot.pause()
        await pilot.press("ctrl+s")
        await settle(pilot)
        chain = app.screen.chain
        assert chain.loss.name == "poisson" and chain.exposure_column == "coins" and chain.weight_column == "w"
        assert "coins" not in chain.schema.names and "w" not in chain.schema.names
        await add_stage(pilot, "glm")
        pane = app.screen.query_one(ResidualPane)
        assert pane.border_title.startswith("deviance residuals · stage 1")
        np.testing.assert_allclose(app.screen.view.residuals.residuals("valid", 1), chain.residuals("valid", 1))
