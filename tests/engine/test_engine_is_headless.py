"""The engine never imports the user interface: stages/ works without textual, rich or tui."""

from __future__ import annotations

import subprocess
import sys


def test_importing_the_engine_loads_no_ui_module():
    code = (
        "import sys, stages, stages.files.store, stages.files.recipe, stages.bridges.estimator\n"
        "import stages.kinds as k; [k.get_kind(n) for n in k.kind_names()]\n"
        # rich is left out: scikit-learn >= 1.9 imports it itself for its progress callbacks
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('textual', 'textual_plotext', 'tui'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_no_engine_module_imports_the_ui():
    from pathlib import Path

    import stages

    root = Path(stages.__file__).parent
    for path in root.rglob("*.py"):
        for line in path.read_text().splitlines():
            words = line.split()
            if len(words) >= 2 and words[0] in ("import", "from"):
                assert words[1].split(".")[0] not in ("textual", "rich", "tui"), f"{path.name}: {line}"
