"""Responsiveness of the workbench (a benchmark, not a test): on the setup screen, moving through the
chain table, and while a LightGBM stage fits in the worker.

The app runs headless (``App.run_test``) on generated data. A timer asks to tick every 20 ms
and records the largest gap between ticks; simulated key presses record how long each waited
before the app took it up and how long the app then took to handle it (the key's response).

- ``--screen setup``: the setup screen opens on the frame (its columns' roles and the target's
  task are worked out in a worker meanwhile) and ``down`` moves through the column list;
- ``--screen table``: a chain with a linear and three ``hist_tree`` stages; ``up`` and ``down``
  move through the table, each move asking for that stage's residual histogram (in a worker);
- ``--screen fit`` (the default): idle, then while a LightGBM stage fits.

Target: keys answered within 100 ms, the timer's ticks within 100 ms of each other.

    python bench/ui_latency.py                          # fit, 1,000,000 rows
    python bench/ui_latency.py --screen all --rows 10000000
"""

from __future__ import annotations

import asyncio
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from textual import events

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402
import tui.app  # noqa: E402
from stages.spec import StageSpec  # noqa: E402
from tui import jobs  # noqa: E402
from tui.app import RemnantApp  # noqa: E402

TICK = 0.020
TARGET = 0.100


def make_frame(rows: int, seed: int = 0) -> pd.DataFrame:
    """Return ``rows`` rows of made-up regression data: 8 numbers, one category, a bent target."""
    rng = np.random.RandomState(seed)
    X = rng.normal(size=(rows, 8))
    depot = rng.randint(0, 5, size=rows)
    y = X @ np.linspace(1.0, -1.0, 8) + 2 * np.sin(2 * X[:, 0]) * (X[:, 1] > 0) + depot + rng.normal(size=rows)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(8)])
    frame["depot"] = np.array(["north", "east", "south", "west", "centre"])[depot]
    frame["y"] = y
    return frame


class ProbedApp(RemnantApp):
    """The workbench, noting when each key event reaches the app, when the app is done with it, and
    when each tick fires."""

    CSS_PATH = str(Path(tui.app.__file__).with_name("app.tcss"))

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.ticks: list[float] = []
        self.key_seen: list[float] = []
        self.key_done: list[float] = []
        self.worker_done = 0.0

    def on_worker_state_changed(self, event) -> None:
        """Note when the fit worker finished, then deliver its result as usual."""
        if event.worker.group == "fit" and event.worker.is_finished:
            self.worker_done = time.perf_counter()
        super().on_worker_state_changed(event)

    def on_mount(self) -> None:
        """Open the workbench and start the 20 ms timer."""
        super().on_mount()
        self.set_interval(TICK, lambda: self.ticks.append(time.perf_counter()))

    async def on_event(self, event: events.Event) -> None:
        """Note the moment a key is taken up and the moment it was handled."""
        if isinstance(event, events.Key):
            self.key_seen.append(time.perf_counter())
            await super().on_event(event)
            self.call_after_refresh(lambda: self.key_done.append(time.perf_counter()))
            return
        await super().on_event(event)


def largest_gap(ticks: list[float], start: float, end: float) -> float:
    """Return the largest gap between consecutive ticks inside [start, end]."""
    inside = [t for t in ticks if start <= t <= end]
    return max((b - a for a, b in zip(inside, inside[1:], strict=False)), default=float("nan"))


async def press_keys(app: ProbedApp, until, keys: tuple[str, ...] = ("down",),
                     responses: list[float] | None = None) -> list[float]:
    """Send harmless keys (``keys`` in turn) every 100 ms until ``until()``, as a terminal's driver
    would; return how long each waited before the app took it up. ``responses`` gets, for each key,
    how long from sending it until the app had handled it and refreshed the screen."""
    delays = []
    count = 0
    while not until():
        before, done = len(app.key_seen), len(app.key_done)
        key = events.Key(keys[count % len(keys)], None)
        count += 1
        key.set_sender(app)
        sent = time.perf_counter()
        app._driver.send_message(key)
        while len(app.key_done) == done and time.perf_counter() - sent < 10:
            await asyncio.sleep(0.001)
        if len(app.key_seen) > before:
            delays.append(app.key_seen[before] - sent)
        if responses is not None and len(app.key_done) > done:
            responses.append(app.key_done[done] - sent)
        await asyncio.sleep(0.1)
    return delays


async def measure_setup(rows: int) -> dict[str, float]:
    """Return the key responses and tick gaps on the setup screen while it reads a frame of ``rows`` rows."""
    frame = make_frame(rows)
    app = ProbedApp(frame=frame, source="bench.csv", target="y", sessions=False)
    responses: list[float] = []
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.pause()  # the first screen is up; its columns are being read in the worker
        start = time.perf_counter()
        deadline = start + 3.0
        keys = await press_keys(app, lambda: time.perf_counter() > deadline and not app.answering,
                                responses=responses)
        end = time.perf_counter()
        ready = app.screen.chain_task is not None
    inside = [t for t in app.ticks if start <= t <= end]
    gaps = sorted(((b - a, a - start) for a, b in zip(inside, inside[1:], strict=False)), reverse=True)[:5]
    print("largest gaps on the setup screen (gap ms @ s after the first screen):",
          ", ".join(f"{g * 1000:.0f} @ {at:.1f}" for g, at in gaps))
    return {"key": max(keys), "response": max(responses), "median": statistics.median(responses),
            "gap": largest_gap(app.ticks, start, end), "keys": len(keys), "busy": end - start, "ready": ready}


async def measure_table(rows: int) -> dict[str, float]:
    """Return the key responses and tick gaps while moving through a four-stage chain's table."""
    chain = stages.Chain(make_frame(rows), "y", stages.Holdout(fraction=0.2, seed=0), "squared")
    chain.add("linear")
    chain.add("hist_tree", 0.3, params={"max_depth": 4}, repeat=3)
    app = ProbedApp(chain=chain, sessions=False)
    responses: list[float] = []
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.pause(0.5)
        while app.answering:
            await pilot.pause(0.1)
        start = time.perf_counter()
        deadline = start + 5.0
        keys = await press_keys(app, lambda: time.perf_counter() > deadline, keys=("up", "up", "up", "down", "down",
                                                                                  "down"), responses=responses)
        end = time.perf_counter()
        while app.answering:
            await pilot.pause(0.1)
        shown = app.screen.query_one("#residual-plot").figure is not None
    return {"key": max(keys), "response": max(responses), "median": statistics.median(responses),
            "gap": largest_gap(app.ticks, start, end), "keys": len(keys), "shown": shown}


async def measure(rows: int, rounds: int, threads: int = 0) -> dict[str, float]:
    """Return the idle and during-fit figures for a LightGBM stage of ``rounds`` rounds on ``rows`` rows."""
    built = time.perf_counter()
    chain = stages.Chain(make_frame(rows), "y", stages.Holdout(fraction=0.2, seed=0), "squared")
    print(f"built the chain on {rows:,} rows in {time.perf_counter() - built:.1f} s")
    app = ProbedApp(chain=chain)
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.pause(0.5)
        idle_start = time.perf_counter()
        deadline = idle_start + 3.0
        idle_keys = await press_keys(app, lambda: time.perf_counter() > deadline)
        idle_end = time.perf_counter()
        screen = app.screen
        spec = StageSpec("lightgbm", 0.5, params={"n_estimators": rounds, "n_jobs": threads})
        fit_start = time.perf_counter()
        app.start_job(jobs.add_stages(screen, chain, screen.cache, screen.view, spec, 1))
        fit_keys = await press_keys(app, lambda: not app.fitting)
        fit_end = app.worker_done
        await pilot.pause(0.5)
        assert screen.view.n_stages == 1, "the stage was not added"
        shown = time.perf_counter()
    inside = [t for t in app.ticks if fit_start <= t <= fit_end]
    gaps = sorted(((b - a, a - fit_start) for a, b in zip(inside, inside[1:], strict=False)), reverse=True)[:5]
    print("largest gaps during the fit (gap ms @ s after start):",
          ", ".join(f"{g * 1000:.0f} @ {at:.1f}" for g, at in gaps))
    refresh = largest_gap(app.ticks, fit_end, shown)
    return {
        "refresh": refresh,
        "fit": fit_end - fit_start,
        "idle_gap": largest_gap(app.ticks, idle_start, idle_end),
        "fit_gap": largest_gap(app.ticks, fit_start, fit_end),
        "idle_key": max(idle_keys), "fit_key": max(fit_keys),
        "fit_key_median": statistics.median(fit_keys), "keys": len(fit_keys),
    }


def print_keys(title: str, r: dict[str, float]) -> None:
    """Print the key figures of one screen."""
    ms = 1000
    target = f"within {TARGET * ms:.0f} ms"
    common.print_table(title, [
        ("longest response to a key (taken up, handled, screen refreshed)", f"{r['response'] * ms:.0f} ms", "",
         target),
        (f"median response to a key ({r['keys']} keys)", f"{r['median'] * ms:.0f} ms", "", ""),
        ("longest wait of a key before the app took it up", f"{r['key'] * ms:.1f} ms", "", target),
        (f"largest gap between {TICK * ms:.0f} ms timer ticks", f"{r['gap'] * ms:.0f} ms", "", target),
    ])


def main() -> None:
    """Run the benchmark and print its figures."""
    parser = common.parser(__doc__.splitlines()[0], 1_000_000)
    parser.add_argument("--screen", choices=("fit", "setup", "table", "all"), default="fit",
                        help="what to measure (default fit)")
    parser.add_argument("--rounds", type=int, default=100, help="LightGBM boosting rounds (default 100)")
    parser.add_argument("--threads", type=int, default=0,
                        help="LightGBM threads for the stage (default 0: LightGBM's own choice, all cores)")
    args = parser.parse_args()
    if args.screen in ("setup", "all"):
        r = asyncio.run(measure_setup(args.rows))
        print_keys(f"the setup screen on {args.rows:,} rows, reading the columns for {r['busy']:.1f} s", r)
    if args.screen in ("table", "all"):
        r = asyncio.run(measure_table(args.rows))
        print_keys(f"moving through a 4-stage chain's table on {args.rows:,} rows (histograms in a worker)", r)
    if args.screen in ("fit", "all"):
        fit_figures(args)


def fit_figures(args) -> None:
    """Measure and print the figures while a LightGBM stage fits."""
    r = asyncio.run(measure(args.rows, args.rounds, args.threads))
    ms = 1000
    threads = f", {args.threads} threads" if args.threads else ""
    target = f"within {TARGET * ms:.0f} ms"
    common.print_table(f"the workbench while a LightGBM stage ({args.rounds} rounds{threads}) fits on "
                       f"{args.rows:,} rows for {r['fit']:.1f} s", [
        (f"largest gap between {TICK * ms:.0f} ms timer ticks, during the fit", f"{r['fit_gap'] * ms:.0f} ms",
         f"{r['idle_gap'] * ms:.0f} ms (idle)", target),
        ("longest wait of a key press, during the fit", f"{r['fit_key'] * ms:.1f} ms",
         f"{r['idle_key'] * ms:.1f} ms (idle)", target),
        (f"median wait of a key press, during the fit ({r['keys']} keys)", f"{r['fit_key_median'] * ms:.1f} ms",
         "", ""),
        ("largest gap while the new stage is shown (table, histogram, plots)", f"{r['refresh'] * ms:.0f} ms",
         "", ""),
    ])


if __name__ == "__main__":
    main()
