"""``--out`` on the command line: a regular file or '-' (standard output); anything else is exit 2.

Pipes and devices are made in the test's own folder (``os.mkfifo``, and a link to ``/dev/null``);
``/dev/null`` must still be the system's character device afterwards, since the suite may run
as root. A second ``remnant fit`` to an output another process holds is refused at once.
"""

from __future__ import annotations

import io
import os
import stat
import subprocess
import sys
import textwrap

import pandas as pd
import pytest

import stages


def devnull_is_intact() -> bool:
    info = os.lstat("/dev/null")
    return stat.S_ISCHR(info.st_mode) and (os.major(info.st_rdev), os.minor(info.st_rdev)) == (1, 3)


@pytest.fixture()
def odd_targets(work):
    """Return a named pipe, a link to /dev/null and a dangling link, all in the work folder."""
    os.mkfifo(work / "pipe.out")
    (work / "null.out").symlink_to("/dev/null")
    (work / "dangling.out").symlink_to(work / "nowhere")
    return {"pipe": work / "pipe.out", "device": work / "null.out", "dangling": work / "dangling.out"}


def one_error(status: int, err: str, words: str) -> None:
    assert status == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and words in lines[0], err


@pytest.mark.parametrize(("target", "words"), [("pipe", "named pipe (FIFO)"), ("device", "character device"),
                                               ("dangling", "symbolic link to nothing")])
def test_fit_refuses_an_out_that_is_not_a_regular_file(work, run, odd_targets, target, words):
    status, out, err = run("fit", "diabetes.toml", "--out", odd_targets[target])
    one_error(status, err, words)
    assert out == "" and devnull_is_intact() and stat.S_ISFIFO(os.lstat(odd_targets["pipe"]).st_mode)
    assert os.readlink(odd_targets["device"]) == "/dev/null"


@pytest.mark.parametrize("target", ["pipe", "device"])
def test_predict_refuses_an_out_that_is_not_a_regular_file(fitted_files, run, odd_targets, target):
    status, out, err = run("predict", fitted_files["regression"], "diabetes.csv", "--out", odd_targets[target])
    one_error(status, err, "not a regular file")
    assert devnull_is_intact()


def test_fit_to_standard_output_writes_the_chain_there_and_the_table_to_stderr(work, capfdbinary):
    import tui.cli

    status = tui.cli.main(["fit", "diabetes.toml", "--out", "-"])
    captured = capfdbinary.readouterr()
    assert status == 0
    assert captured.out[:4] == b"PK\x03\x04"
    (work / "from-stdout.chain").write_bytes(captured.out)
    assert len(stages.load(work / "from-stdout.chain").stages) >= 1
    assert b"saved the chain file to standard output" in captured.err and b"stage" in captured.err


def test_predict_to_standard_output_with_a_dash(fitted_files, run):
    status, out, err = run("predict", fitted_files["regression"], "diabetes.csv", "--out", "-")
    assert status == 0, err
    assert len(pd.read_csv(io.StringIO(out))) == len(pd.read_csv("diabetes.csv"))


def test_a_second_fit_to_an_output_another_process_holds_is_refused_before_fitting(work, run):
    code = textwrap.dedent(f"""
        import sys
        from stages.atomic import OutputLock
        with OutputLock({str(work / 'same.chain')!r}):
            print("held", flush=True)
            sys.stdin.readline()
    """)
    holder = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        status, out, err = run("fit", "diabetes.toml", "--out", "same.chain")
        one_error(status, err, "another remnant")
        assert out == "" and not (work / "same.chain").exists()
    finally:
        holder.communicate("done\n", timeout=120)
    status, out, err = run("fit", "diabetes.toml", "--out", "same.chain")
    assert status == 0 and (work / "same.chain").exists(), err


def test_explore_refuses_a_named_pipe_as_data(work, run, odd_targets):
    status, out, err = run("explore", odd_targets["pipe"])
    one_error(status, err, "named pipe (FIFO), not a regular file")
