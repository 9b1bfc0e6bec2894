"""Fixtures of the command-line tests: a folder of small data files and recipes, and ``remnant`` run in-process."""

from __future__ import annotations

from pathlib import Path

import pytest
from cli_support import BINARY_RECIPE, REGRESSION_RECIPE, cancer_frame, diabetes_frame, write_recipe

import tui.cli


@pytest.fixture
def work(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """Return a folder holding diabetes.csv, cancer.csv and their recipes; it is the current folder."""
    diabetes_frame().to_csv(tmp_path / "diabetes.csv", index=False)
    cancer_frame().to_csv(tmp_path / "cancer.csv", index=False)
    write_recipe(tmp_path, REGRESSION_RECIPE, "diabetes.toml")
    write_recipe(tmp_path, BINARY_RECIPE, "cancer.toml")
    monkeypatch.chdir(tmp_path)
    return tmp_path


@pytest.fixture
def run(capsys: pytest.CaptureFixture[str]):
    """Return a function that runs ``remnant`` in-process and gives (status, stdout, stderr)."""

    def invoke(*argv: str) -> tuple[int, str, str]:
        status = tui.cli.main([str(a) for a in argv])
        out, err = capsys.readouterr()
        return status, out, err

    return invoke


@pytest.fixture(scope="session")
def chain_files(tmp_path_factory: pytest.TempPathFactory) -> dict[str, bytes]:
    """Return the bytes of a regression and a binary chain file, fit once from the two recipes."""
    from stages.files.recipe import fit_recipe

    folder = tmp_path_factory.mktemp("chains")
    diabetes_frame().to_csv(folder / "diabetes.csv", index=False)
    cancer_frame().to_csv(folder / "cancer.csv", index=False)
    out = {}
    for kind, name, text in (("regression", "diabetes", REGRESSION_RECIPE), ("binary", "cancer", BINARY_RECIPE)):
        fit_recipe(write_recipe(folder, text, f"{name}.toml")).save(folder / f"{name}.chain")
        out[kind] = (folder / f"{name}.chain").read_bytes()
    return out


@pytest.fixture
def fitted_files(work: Path, chain_files: dict[str, bytes]) -> dict[str, Path]:
    """Return the paths of the regression and binary chain files, copied into the work folder."""
    paths = {"regression": work / "diabetes.chain", "binary": work / "cancer.chain"}
    for kind, path in paths.items():
        path.write_bytes(chain_files[kind])
    return paths
