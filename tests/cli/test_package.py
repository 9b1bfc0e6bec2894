"""What the installed package needs at run time is package data, so a wheel works anywhere.

(CI also builds the wheel, installs it into a fresh virtualenv and runs ``remnant demo --headless``
from a temporary folder: see .ci/run.)
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import tui
from tui.demo_app import demo_folder

ROOT = Path(__file__).resolve().parents[2]


def test_the_demo_data_and_recipes_are_package_data_of_the_workbench():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    patterns = config["tool"]["setuptools"]["package-data"]["tui"]
    package = Path(tui.__file__).resolve().parent
    assert demo_folder().parent == package
    needed = [demo_folder() / name for name in ("deliveries.csv", "deliveries.toml", "deliveries_binary.toml",
                                                     "delay_causes.csv", "delay_causes.toml",
                                                     "vehicle_months.csv", "vehicle_alarms.toml")]
    needed.append(package / "app.tcss")
    for path in needed:
        assert path.is_file()
        assert any(path.relative_to(package).match(pattern) for pattern in patterns), f"{path.name} is not packaged"


def test_the_license_is_an_spdx_expression():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    assert config["project"]["license"] == "MIT"
