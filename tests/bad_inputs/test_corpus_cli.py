"""Every bad input of the corpus through the command line.

``remnant fit RECIPE --out X.chain`` with a recipe pointing at the bad file, and ``remnant
predict`` with a valid chain on the bad file: status 2 and exactly one stderr line starting
``error:`` for errors, status 0 (with the documented note) for handled inputs, never a
traceback, and an existing --out file never overwritten by a failed command. Most runs are
in-process (``tui.cli.main``); a few are real subprocesses.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from corpus import GOOD_NAME, build_corpus, corpus_entries, pytest_params

import stages
import tui.cli

PRECIOUS = b"an earlier result the user wants to keep\n"
RECIPE = """[data]
path = "{path}"
target = "{target}"

[chain]
seed = 0

[[stage]]
kind = "linear"
"""


@pytest.fixture(scope="module")
def corpus(tmp_path_factory) -> tuple[Path, dict[str, Path]]:
    """Return the corpus folder (with one recipe per entry and good.chain) and each entry's path."""
    folder = tmp_path_factory.mktemp("corpus_cli")
    paths = build_corpus(folder)
    for entry in corpus_entries():
        (folder / f"{entry.name}.toml").write_text(RECIPE.format(path=paths[entry.name].name, target=entry.target))
    chain = stages.Chain.from_file(folder / GOOD_NAME, target="y")
    chain.add("linear")
    chain.save(folder / "good.chain")
    return folder, paths


@pytest.fixture()
def run(capsys):
    """Return a function running ``remnant`` in-process; it gives (status, stdout, stderr)."""

    def invoke(*argv) -> tuple[int, str, str]:
        status = tui.cli.main([str(a) for a in argv])
        out, err = capsys.readouterr()
        return status, out, err

    return invoke


@pytest.fixture()
def keep(tmp_path) -> Path:
    """Return an existing output file whose bytes a failed command must leave alone."""
    path = tmp_path / "keep.out"
    path.write_bytes(PRECIOUS)
    return path


def assert_one_error(status: int, err: str, words: tuple[str, ...]) -> None:
    assert status == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    assert all(w in lines[0] for w in words), lines[0]


@pytest.mark.parametrize("entry", pytest_params("fit"))
def test_fit_on_each_bad_input(entry, corpus, run, keep, tmp_path):
    folder, _ = corpus
    recipe = folder / f"{entry.name}.toml"
    if entry.is_error:
        status, out, err = run("fit", recipe, "--out", keep)
        assert_one_error(status, err, entry.error)
        assert out == "" and keep.read_bytes() == PRECIOUS
        return
    chain_file = tmp_path / "new.chain"
    status, out, err = run("fit", recipe, "--out", chain_file)
    assert status == 0, err
    assert "Traceback" not in err and not any(line.startswith(("error:", "warning:")) for line in err.splitlines())
    if entry.note:
        notes = [line for line in err.splitlines() if line.startswith("note: ")]
        assert any(all(w in line for w in entry.note) for line in notes), err
    assert "linear" in out and len(stages.load(chain_file).stages) == 1


@pytest.mark.parametrize("entry", pytest_params("predict"))
def test_predict_on_each_bad_input(entry, corpus, run, keep):
    folder, paths = corpus
    status, out, err = run("predict", folder / "good.chain", paths[entry.name], "--out", keep)
    assert "Traceback" not in err
    if entry.predict_error:
        assert_one_error(status, err, entry.predict_error)
        assert keep.read_bytes() == PRECIOUS
        return
    assert status == 0, err
    predictions = pd.read_csv(keep)
    assert list(predictions.columns) == ["prediction"] and len(predictions) == entry.data_rows


# ----------------------------------------------------------------------------- real processes
def remnant(*argv, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "tui.cli", *map(str, argv)], cwd=cwd, capture_output=True,
                          text=True, timeout=120)


def test_a_real_process_fails_on_an_empty_file_with_status_2_and_one_line(corpus, keep):
    folder, _ = corpus
    done = remnant("fit", "empty.toml", "--out", keep, cwd=folder)
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr == "error: empty.csv: the file is empty\n"
    assert keep.read_bytes() == PRECIOUS


def test_a_real_process_fits_past_an_id_column_with_its_note(corpus, tmp_path):
    folder, _ = corpus
    done = remnant("fit", "id_column.toml", "--out", tmp_path / "ids.chain", cwd=folder)
    assert done.returncode == 0, done.stderr
    assert "note: column 'order_id' is an id (a distinct value on every row), not a feature" in done.stderr.splitlines()
    assert "Traceback" not in done.stderr


def test_a_real_process_refuses_to_predict_on_duplicate_column_names(corpus, keep):
    folder, _ = corpus
    done = remnant("predict", "good.chain", "duplicates.csv", "--out", keep, cwd=folder)
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr == "error: duplicates.csv: column 'x1' appears twice in the header\n"
    assert keep.read_bytes() == PRECIOUS
