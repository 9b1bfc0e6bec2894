"""Write ``workbench.svg`` beside this file: the main screen of the demo app once its recipe is fit.

The README shows it. Run ``python demo/screenshot.py`` (``--size 100x30`` by default) after a
change to the screens; fit times are hidden so the picture only changes when the screen does.
"""

from __future__ import annotations

import argparse
import asyncio
from pathlib import Path

from tui.demo_app import demo_app


async def screenshot(width: int, height: int) -> str:
    """Return the SVG of the demo's main screen at ``width`` x ``height`` once every fit is done."""
    app = demo_app(timings=False)
    async with app.run_test(size=(width, height)) as pilot:
        await app.workers.wait_for_complete()
        for _ in range(3):
            await pilot.pause()
        return app.export_screenshot(title="remnant demo")


def main() -> None:
    """Parse ``--size`` and ``--out``, then write the screenshot."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", default="100x30", help="terminal size as COLUMNSxROWS (default 100x30)")
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent / "workbench.svg")
    args = parser.parse_args()
    width, height = (int(part) for part in args.size.lower().split("x"))
    args.out.write_text(asyncio.run(screenshot(width, height)), encoding="utf-8")
    print(f"wrote {args.out.name} ({width}x{height})")


if __name__ == "__main__":
    main()
