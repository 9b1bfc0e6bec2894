"""Write the README's pictures beside this file: the demo app's main screen once its recipe is fit
(``workbench.svg``) and the scan after its linear start (``scan.svg``).

Run ``python demo/screenshot.py`` (``--size 100x30`` by default) after a change to the screens;
fit times are hidden so the pictures only change when the screens do.
"""

from __future__ import annotations

import argparse
import asyncio
from pathlib import Path

from tui.demo_app import demo_app

HERE = Path(__file__).resolve().parent


async def settle(pilot) -> None:
    """Wait until every fit and every pane's question is done."""
    app = pilot.app
    for _ in range(400):
        await app.workers.wait_for_complete()
        await pilot.pause()
        if not app.fitting and not app.answering:
            return


async def screenshot(width: int, height: int, keys: tuple[str, ...] = ()) -> str:
    """Return the SVG of the demo's main screen at ``width`` x ``height`` once every fit is done and
    ``keys`` were pressed (each followed by the work it starts)."""
    app = demo_app(timings=False)
    async with app.run_test(size=(width, height)) as pilot:
        await settle(pilot)
        for key in keys:
            await pilot.press(key)
            await settle(pilot)
        for _ in range(3):
            await pilot.pause()
        return app.export_screenshot(title="remnant demo")


#: picture -> the keys that lead to it from the fitted demo
PICTURES = {
    "workbench.svg": (),
    # stage 1 (the linear start), the view against a feature ranked by the scan
    "scan.svg": ("home", "down", "v", "v"),
}


def main() -> None:
    """Parse ``--size`` and ``--out``, then write the pictures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", default="100x30", help="terminal size as COLUMNSxROWS (default 100x30)")
    parser.add_argument("--out", type=Path, default=HERE, help="the folder to write into (default: demo/)")
    args = parser.parse_args()
    width, height = (int(part) for part in args.size.lower().split("x"))
    for name, keys in PICTURES.items():
        (args.out / name).write_text(asyncio.run(screenshot(width, height, keys)), encoding="utf-8")
        print(f"wrote {name} ({width}x{height})")


if __name__ == "__main__":
    main()
