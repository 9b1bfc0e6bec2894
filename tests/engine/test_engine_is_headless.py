"""The engine never imports the user interface: stages/ works without textual, rich or tui."""

from __future__ import annotations

import subprocess
import sys


def test_importing_the_engine_loads_no_ui_module():
    code = (
        "import sys, stages, stages.store, stages.recipe, stages.estimator\n"
        "import stages.kinds as k; [k.get_kind(n) for n in k.kind_names()]\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('textual', 'rich', 'tui'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
