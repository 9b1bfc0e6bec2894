"""First screen of ``remnant demo``: from starting a Python process to the workbench screen mounted.

The app runs headless (Textual's ``run_test``) in a fresh process started by this script; the
figure is the wall time from starting that process until it reports the main screen mounted
(best of ``--repeats``). The demo chain keeps fitting in workers after that; the figure is
what the user waits for before the screen is there.

    python bench/first_screen.py [--repeats N]
"""

from __future__ import annotations

import asyncio
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
MOUNTED = "mounted"
TIMEOUT = 60.0


async def wait_for_main_screen() -> None:
    """Run the demo app headless until its workbench screen is mounted, then quit."""
    from tui.demo_app import demo_app
    from tui.screens.workbench import WorkbenchScreen

    app = demo_app()
    async with app.run_test(size=(120, 40)) as pilot:
        deadline = time.monotonic() + TIMEOUT
        while not (isinstance(app.screen, WorkbenchScreen) and app.screen.is_mounted):
            if time.monotonic() > deadline:
                raise SystemExit("the workbench screen did not appear")
            await pilot.pause(0.01)
        print(MOUNTED, flush=True)
        app.exit()


def one_run() -> float:
    """Return the seconds from starting a child process to its report of the mounted screen."""
    started = time.perf_counter()
    child = subprocess.Popen([sys.executable, __file__, "--child"], cwd=ROOT, stdout=subprocess.PIPE, text=True)
    assert child.stdout is not None
    for line in child.stdout:
        if line.strip() == MOUNTED:
            seconds = time.perf_counter() - started
            break
    else:
        child.wait()
        raise SystemExit(f"the demo app ended (status {child.returncode}) before its screen was mounted")
    child.wait(timeout=TIMEOUT)
    return seconds


def main() -> None:
    """Print the figure, or (with --child) run the app once."""
    parse = common.parser(__doc__.splitlines()[0], 0)
    parse.add_argument("--repeats", type=int, default=3)
    parse.add_argument("--child", action="store_true", help="(internal) run the app once")
    args = parse.parse_args()
    if args.child:
        sys.path.insert(0, str(ROOT))
        asyncio.run(wait_for_main_screen())
        return
    try:
        import tui.demo_app  # noqa: F401
    except ImportError:
        print("first screen: tui.demo_app does not exist yet; nothing to measure")
        return
    seconds = min(one_run() for _ in range(args.repeats))
    common.print_table("first screen", [
        ("remnant demo: process start to workbench mounted", f"{seconds:.2f} s", "none", "(under 3 s)"),
    ])


if __name__ == "__main__":
    main()
