"""``remnant`` as a real process: exit statuses, clean stderr, and a --help that imports nothing heavy."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from cli_support import REGRESSION_RECIPE, assert_one_error, write_recipe

HEAVY = ("pandas", "numpy", "sklearn", "lightgbm", "textual", "stages", "scipy", "pyarrow")


def remnant(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    """Run ``python -m tui.cli`` with ``args`` and return the finished process."""
    return subprocess.run([sys.executable, "-m", "tui.cli", *map(str, args)], cwd=cwd, capture_output=True,
                          text=True, timeout=300, check=False)


def test_help_imports_no_engine_and_no_heavy_library():
    done = subprocess.run([sys.executable, "-X", "importtime", "-m", "tui.cli", "--help"], capture_output=True,
                          text=True, timeout=60, check=False)
    assert done.returncode == 0 and done.stdout.startswith("usage: remnant")
    imported = {line.split("|")[-1].strip().split(".")[0] for line in done.stderr.splitlines() if "|" in line}
    assert not imported & set(HEAVY), sorted(imported & set(HEAVY))


def test_every_command_help_imports_nothing_heavy():
    code = ("import sys, tui.cli\n"
            "for c in ('demo', 'explore', 'fit', 'predict', 'show'):\n"
            "    assert tui.cli.main([c, '--help']) == 0\n"
            f"print(sorted(m for m in sys.modules if m.split('.')[0] in {HEAVY!r}))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines()[-1] == "[]"


def test_fit_then_show_succeed_and_a_bad_recipe_exits_2_without_traceback(work):
    done = remnant("fit", "diabetes.toml", "--out", "d.chain", cwd=work)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr and (work / "d.chain").exists()
    shown = remnant("show", "d.chain", cwd=work)
    assert shown.returncode == 0 and "linear" in shown.stdout
    write_recipe(work, REGRESSION_RECIPE.replace("max_depth = 2", "max_dept = 2"), "bad.toml")
    before = (work / "d.chain").read_bytes()
    bad = remnant("fit", "bad.toml", "--out", "d.chain", cwd=work)
    assert_one_error(bad.returncode, bad.stderr, "bad.toml line 21: kind 'tree' has no parameter 'max_dept'")
    assert (work / "d.chain").read_bytes() == before


def test_a_truncated_chain_file_exits_2_without_traceback(work):
    (work / "cut.chain").write_bytes(b"PK\x03\x04" + b"\x00" * 40)
    done = remnant("predict", "cut.chain", "diabetes.csv", cwd=work)
    assert done.stdout == ""
    assert_one_error(done.returncode, done.stderr, "cut.chain")


def test_a_usage_mistake_exits_2_with_one_error_line():
    done = remnant("fit", "recipe.toml")
    assert_one_error(done.returncode, done.stderr, "--out")
    assert done.stderr.count("\n") == 1
