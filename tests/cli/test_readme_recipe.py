"""The recipe shown in the README is a valid recipe, and the demo recipes replay."""

from __future__ import annotations

import re
from pathlib import Path

from stages.files.recipe import parse_recipe, read_recipe
from tui.demo_app import demo_folder

ROOT = Path(__file__).resolve().parents[2]


def test_the_readme_recipe_example_parses():
    text = (ROOT / "README.md").read_text()
    block = re.search(r"## Recipes.*?```toml\n(.*?)```", text, re.S).group(1)
    recipe = parse_recipe(block, demo_folder())
    assert recipe.target == "minutes_late"
    assert recipe.patience == {1: 10}
    assert len(recipe.auditions[0].candidates) == 5  # 3 forests from the grid, 2 LightGBM


def test_the_demo_recipes_parse():
    for name in ("deliveries.toml", "deliveries_binary.toml", "delay_causes.toml", "vehicle_alarms.toml"):
        assert read_recipe(demo_folder() / name).stages
