"""Hostile recipes, data and sessions: one ``error:`` line and exit 2, never a traceback, a hang or a runaway.

Each case was once a traceback or unbounded work. Those that could block for ever if the check
regressed (pipes, devices) run in a child process with a timeout that only catches a hang.
"""

from __future__ import annotations

import os
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from corpus import good_frame

import stages
import tui.cli
from stages.files.session import SessionError, data_changes, load_session, save_session

RECIPE = """[data]
path = "{path}"
target = "y"

[chain]
seed = {seed}

[[stage]]
kind = "{kind}"
repeat = {repeat}
"""
HANG_SECONDS = 120


@pytest.fixture()
def folder(tmp_path, monkeypatch) -> Path:
    """Return a folder holding good.csv (the corpus's good table) as the current folder."""
    good_frame().to_csv(tmp_path / "good.csv", index=False)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("REMNANT_HOME", str(tmp_path / "home"))
    return tmp_path


def recipe(folder: Path, *, path: str = "good.csv", seed: object = 0, kind: str = "linear", repeat: int = 1,
           extra: str = "") -> Path:
    file = folder / "r.toml"
    file.write_text(RECIPE.format(path=path, seed=seed, kind=kind, repeat=repeat) + extra)
    return file


def run(*argv) -> tuple[int, str, str]:
    """Run ``remnant`` in-process; return status, stdout and stderr (captured by pytest)."""
    import contextlib
    import io

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = tui.cli.main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


_DRIVER = """
import contextlib, io, json, sys
import tui.cli
for argv in json.loads(sys.argv[1]):
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        status = tui.cli.main(argv)
    print(json.dumps([status, err.getvalue()]), flush=True)
"""


def guarded(*commands: tuple, cwd: Path) -> list[tuple[int, str]]:
    """Run each ``remnant`` command line in one child process; return (status, stderr) per command. A hang
    past HANG_SECONDS (a check that no longer stops a pipe or a device being read) raises TimeoutExpired."""
    import json

    argv = json.dumps([[str(a) for a in command] for command in commands])
    done = subprocess.run([sys.executable, "-c", _DRIVER, argv], cwd=cwd, capture_output=True, text=True,
                          timeout=HANG_SECONDS)
    assert done.returncode == 0, done.stderr
    return [tuple(json.loads(line)) for line in done.stdout.splitlines()]


def one_error(status: int, err: str, *words: str) -> None:
    assert status == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and "Traceback" not in err, err
    assert all(w in lines[0] for w in words), lines[0]


# ----------------------------------------------------------------------------- recipes
@pytest.mark.parametrize(("seed", "words"), [(-1, "seed must be a whole number from 0 to 4,294,967,295"),
                                             (2**64, "18,446,744,073,709,551,616")])
def test_a_seed_outside_the_random_streams_range_is_one_error(folder, seed, words):
    one_error(*run("fit", recipe(folder, seed=seed), "--out", "c.chain")[::2], words)


def test_a_repeat_of_a_billion_is_refused_before_any_work(folder):
    one_error(*run("fit", recipe(folder, repeat=10**9), "--out", "c.chain")[::2], "repeat must be at most 10,000")


def test_too_many_stages_in_all_are_refused(folder):
    extra = "".join('\n[[stage]]\nkind = "mean"\nrepeat = 10000\n' for _ in range(2))
    one_error(*run("fit", recipe(folder, extra=extra), "--out", "c.chain")[::2], "at most 10,000")


def test_folds_beyond_the_limit_are_refused(folder):
    extra = '\n[validation]\nscheme = "kfold"\nfolds = 1000000\n'
    one_error(*run("fit", recipe(folder, extra=extra), "--out", "c.chain")[::2], "folds must be at most 100")


def test_a_grid_of_ten_billion_candidates_is_refused_without_building_it(folder):
    values = "[" + ", ".join(str(v) for v in range(10)) + "]"
    params = ", ".join(f"p{i} = {values}" for i in range(10))
    extra = f"\n[[audition]]\n[[audition.candidate]]\nkind = \"tree\"\nparams = {{ {params} }}\n"
    status, _, err = run("fit", recipe(folder, extra=extra), "--out", "c.chain")
    one_error(status, err, "10,000,000,000 candidates", "at most 64")


def test_a_toml_value_nested_5000_deep_is_one_error(folder):
    (folder / "deep.toml").write_text("value = " + "[" * 5000 + "]" * 5000 + "\n")
    one_error(*run("fit", folder / "deep.toml", "--out", "c.chain")[::2], "nested too deeply")


def test_a_named_pipe_or_a_device_as_recipe_or_data_is_refused_at_once(folder):
    os.mkfifo(folder / "pipe.csv")
    os.mkfifo(folder / "pipe.toml")
    status, _, _ = run("fit", recipe(folder), "--out", "good.chain")
    assert status == 0
    (folder / "zero.toml").write_text(RECIPE.format(path="/dev/zero", seed=0, kind="linear", repeat=1))
    (folder / "pipe-data.toml").write_text(RECIPE.format(path="pipe.csv", seed=0, kind="linear", repeat=1))
    results = guarded(("fit", "zero.toml", "--out", "c.chain"), ("fit", "pipe-data.toml", "--out", "c.chain"),
                      ("fit", "pipe.toml", "--out", "c.chain"), ("predict", "good.chain", "pipe.csv"),
                      ("predict", "good.chain", "/dev/zero"), cwd=folder)
    expected = [("zero", "character device, not a regular file"), ("pipe.csv", "named pipe (FIFO)"),
                ("pipe.toml", "named pipe (FIFO)"), ("pipe.csv", "named pipe (FIFO)"), ("zero", "character device")]
    for (status, err), words in zip(results, expected, strict=True):
        one_error(status, err, *words)


# ----------------------------------------------------------------------------- data
def test_a_huge_feature_value_predicted_through_a_tree_stage_is_a_prediction_not_a_traceback(folder):
    status, _, err = run("fit", recipe(folder, kind="tree"), "--out", "tree.chain")
    assert status == 0, err
    frame = good_frame()
    frame.loc[3, "x1"] = 1e300
    frame.to_csv(folder / "huge.csv", index=False)
    status, out, err = run("predict", "tree.chain", "huge.csv")
    assert status == 0, err
    assert "Traceback" not in err and err.startswith("warning: ") and "beyond ±3.4e38" in err
    from io import StringIO

    predictions = pd.read_csv(StringIO(out))["prediction"]
    assert len(predictions) == len(frame) and np.isfinite(predictions).all()
    fitted = stages.load(folder / "tree.chain")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert np.isfinite(fitted.predict(frame)).all()


def test_parquet_with_a_named_index_is_read_the_same_in_fit_and_predict(folder):
    frame = good_frame().set_index(pd.Index([f"D{i:03d}" for i in range(60)], name="delivery"))
    frame["code"] = np.arange(60) % 7  # a numeric column, so the index is not the only extra one
    frame.to_parquet(folder / "indexed.parquet")
    chain = stages.Chain.from_file(folder / "indexed.parquet", target="y")
    assert "delivery" not in chain.schema.names and any("'delivery'" in note for note in chain.notes)
    chain.add("linear")
    chain.save(folder / "indexed.chain")
    status, out, err = run("predict", "indexed.chain", "indexed.parquet", "--id", "delivery")
    assert status == 0, err
    from io import StringIO

    written = pd.read_csv(StringIO(out))
    assert list(written.columns) == ["delivery", "prediction"] and written["delivery"].iloc[0] == "D000"


def _damaged_parquet(folder: Path, column: str) -> Path:
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = good_frame(400)
    path = folder / "damaged.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path, compression="NONE", use_dictionary=False)
    data = bytearray(path.read_bytes())
    values = frame[column].to_numpy().tobytes()
    at = data.find(values[:64])
    for i in range(at + 800, at + 1600, 8):
        data[i + 6] ^= 0x5A  # garble the exponents of 100 values, as a damaged page would
    path.write_bytes(bytes(data))
    return path


@pytest.mark.parametrize("column", ["y", "x2"])
def test_damaged_parquet_pages_are_refused_by_the_files_own_statistics(folder, column):
    path = _damaged_parquet(folder, column)
    with pytest.raises(stages.DataError, match=f"column '{column}' holds .* outside the range .* the file is damaged"):
        stages.Chain.from_file(path, target="y")
    if column == "x2":  # a feature: predict reads it too
        status, _, _ = run("fit", recipe(folder), "--out", "good.chain")
        assert status == 0
        one_error(*run("predict", "good.chain", path)[::2], "column 'x2'", "the file is damaged")


# ----------------------------------------------------------------------------- sessions
def _session_pointing_at(folder: Path, stored: str) -> tuple[Path, Path]:
    """Save a session of good.csv, then rewrite its stored data path to ``stored``."""
    import json
    import zipfile

    chain = stages.Chain.from_file(folder / "good.csv", target="y")
    chain.add("linear")
    path = save_session(chain)
    with zipfile.ZipFile(path) as archive:
        members = {n: archive.read(n) for n in archive.namelist()}
    manifest = json.loads(members["session.json"])
    manifest["data"]["path"] = stored
    members["session.json"] = json.dumps(manifest).encode()
    with zipfile.ZipFile(path, "w") as archive:
        for name, data in members.items():
            archive.writestr(name, data)
    return path, folder / "good.csv"


def test_a_session_whose_stored_path_is_dev_zero_is_never_read(folder):
    path, opened = _session_pointing_at(folder, "/dev/zero")
    assert data_changes(path, opened) == []  # the file the user opened is compared, not the stored one
    with pytest.raises(SessionError, match="name the data file"):
        data_changes(path)  # on its own, this session (kept for good.csv) may not choose /dev/zero
    assert len(load_session(path, opened)) == 1


def test_a_session_resumes_on_the_file_opened_never_the_stored_path(folder):
    path, opened = _session_pointing_at(folder, "/etc/passwd")
    restored = load_session(path, opened)
    assert restored.data_path == os.fspath(opened) and len(restored) == 1
    other = folder / "other.csv"
    good_frame().assign(y=lambda f: f.y + 1).to_csv(other, index=False)
    with pytest.raises(SessionError, match="not the file the session was fit on|data changed"):
        load_session(path, other)


def test_the_workbench_offer_compares_the_file_the_user_opened(folder):
    from tui.sessions import resume_offer

    path, opened = _session_pointing_at(folder, "/dev/zero")
    offer = resume_offer(opened)
    assert offer is not None and not offer.problem and not offer.changed
    assert offer.data_path == str(opened)
