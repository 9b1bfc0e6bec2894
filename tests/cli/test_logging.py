"""The log: one ``remnant`` hierarchy, ``--verbose`` on standard error, the workbench's log file."""

from __future__ import annotations

import logging

import stages
from tui import logs


def test_the_engine_logs_under_remnant(caplog, work):
    with caplog.at_level(logging.INFO, logger="remnant"):
        chain = stages.fit_recipe("diabetes.toml")
        chain.step_back()
    names = {record.name for record in caplog.records}
    assert names and all(name.startswith("remnant.stages.") for name in names)
    assert any("stepped back from stage 3 (tree)" in record.getMessage() for record in caplog.records)


def test_verbose_logs_to_stderr_and_quiet_is_the_default(work, run):
    status, _, quiet = run("fit", "diabetes.toml", "--out", "quiet.chain")
    assert status == 0 and "remnant.stages" not in quiet
    status, _, loud = run("fit", "diabetes.toml", "--out", "loud.chain", "--verbose")
    assert status == 0 and "remnant.stages.chain: added 1 stage(s) (linear)" in loud
    assert not logging.getLogger("remnant").handlers[1:], "the command leaves no handler behind"


def test_verbose_shows_the_traceback_behind_an_error_line(work, run):
    (work / "bad.chain").write_bytes(b"PK\x03\x04 not really a zip archive")
    status, _, err = run("--verbose", "show", "bad.chain")
    assert status == 2 and err.splitlines()[-1].startswith("error: bad.chain")
    assert "Traceback" in err and "ChainFileError" in err
    status, _, err = run("show", "bad.chain")
    assert status == 2 and "Traceback" not in err and len(err.splitlines()) == 1


def test_the_workbench_log_file_is_under_remnant_home(tmp_path, monkeypatch):
    monkeypatch.setenv("REMNANT_HOME", str(tmp_path))
    handler = logs.log_to_file()
    try:
        logs.logger("tui.test").info("a line for the file")
    finally:
        logs.stop_logging(handler)
    path = tmp_path / "logs" / "remnant.log"
    assert handler is not None and handler.baseFilename == str(path)
    assert "remnant.tui.test: a line for the file" in path.read_text(encoding="utf-8")
