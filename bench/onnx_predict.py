"""Scoring with the exported ONNX model in onnxruntime against the chain's own predict, on the same rows.

A chain (linear, 10 tree stages of depth 3, a 100-round lightgbm stage), fit on ``--fit-rows``
rows of ``FEATURES`` features, is saved, loaded and exported with ``to_onnx``; then ``--rows``
new rows are scored by ``FittedChain.predict`` from a DataFrame (what ``remnant predict`` runs on
each chunk it reads) and by onnxruntime from the same columns. The outputs are checked to agree
to 1e-9 relative before any time is printed. Figure: onnxruntime's time over predict's (no target;
both use every core).

    python bench/onnx_predict.py [--rows N] [--fit-rows N] [--repeats N]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402

import stages  # noqa: E402

FEATURES = 20


def exported_chain(folder: Path, fit_rows: int) -> tuple[stages.FittedChain, Path]:
    """Return the loaded chain and the path of its ONNX model."""
    frame = common.make_regression_frame(fit_rows, FEATURES, seed=1)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), seed=0)
    chain.add("linear")
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=10)
    chain.add("lightgbm", 0.5, params={"n_estimators": 100, "num_leaves": 15})
    chain.save(folder / "bench.chain")
    fitted = stages.load(folder / "bench.chain")
    fitted.to_onnx(folder / "bench.onnx")
    return fitted, folder / "bench.onnx"


def timings(fitted: stages.FittedChain, model: Path, rows: int, repeats: int) -> tuple[float, float]:
    """Return the best-of seconds of (onnxruntime, predict) on ``rows`` new rows, measured in turn."""
    import onnxruntime

    frame = common.make_regression_frame(rows, FEATURES, seed=3).drop(columns="y")
    inputs = {name: frame[name].to_numpy(dtype=np.float64) for name in fitted.schema.names}
    session = onnxruntime.InferenceSession(str(model), providers=["CPUExecutionProvider"])
    ours = runtime = float("inf")
    for _ in range(repeats):
        started = time.perf_counter()
        (scored,) = session.run(["prediction"], inputs)
        runtime = min(runtime, time.perf_counter() - started)
        started = time.perf_counter()
        expected = fitted.predict(frame)
        ours = min(ours, time.perf_counter() - started)
        gap = float(np.max(np.abs(scored - expected) / np.maximum(np.abs(expected), 1.0)))
        assert gap <= 1e-9, f"onnxruntime and predict disagree by {gap:.3g}"
    return runtime, ours


def main() -> None:
    """Print the figure."""
    parse = common.parser(__doc__.splitlines()[0], 1_000_000)
    parse.add_argument("--fit-rows", type=int, default=100_000, help="rows the chain is fit on")
    parse.add_argument("--repeats", type=int, default=3, help="measure each side this many times, keep the best")
    args = parse.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        fitted, model = exported_chain(Path(folder), args.fit_rows)
        runtime, ours = timings(fitted, model, args.rows, args.repeats)
    common.print_table("scoring with the exported ONNX model", [
        (f"onnxruntime scoring {args.rows:,} x {FEATURES} rows, 12 stages", f"{runtime:.2f} s",
         f"{ours:.2f} s (FittedChain.predict, as remnant predict runs it)", f"{runtime / ours:.3f} (no target)"),
    ])


if __name__ == "__main__":
    main()
