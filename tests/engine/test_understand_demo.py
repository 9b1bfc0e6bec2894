"""The demo's story found by following the scan (demo/README.md: rush hours, a temperature
threshold for heavy loads, and noise that widens with distance)."""

from __future__ import annotations

import pytest

from stages.files.recipe import build_chain, read_recipe
from tui.demo_app import demo_folder

DEMO = demo_folder()


@pytest.fixture(scope="module")
def scan():
    """Return the scan of the demo chain after its linear start (the recipe's first stage)."""
    recipe = read_recipe(DEMO / "deliveries.toml")
    chain = build_chain(recipe)
    first, _ = recipe.stages[0]
    assert first.kind == "linear"
    chain.add_specs([first])
    return chain.residual_scan()


def test_rush_hours_rank_first_after_the_linear_start(scan):
    # leaving at 7-9 or 16-18 adds 22 and 30 minutes: a step in hour a line cannot draw
    assert scan.loc[0, "feature"] == "hour" and bool(scan.loc[0, "stands_out"])


def test_the_heat_threshold_is_next(scan):
    # above 27 degrees heavy loads add 38 minutes; temperature carries the threshold on its own
    assert scan.loc[1, "feature"] == "outside_temp_c" and bool(scan.loc[1, "stands_out"])
    # the weekday shapes the rush (weekends get 30 % of it): it is found too
    assert "weekday" in list(scan.loc[:2, "feature"])


def test_noise_that_widens_with_distance_shows_in_the_spread(scan):
    by_spread = scan.sort_values("spread_score", ascending=False).reset_index(drop=True)
    # the heat bump makes hot bins a mixture, which also widens their spread; distance is next
    assert "distance_km" in list(by_spread.loc[:1, "feature"])
    assert bool(by_spread.set_index("feature").loc["distance_km", "spread_stands_out"])
