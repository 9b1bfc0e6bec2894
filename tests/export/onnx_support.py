"""Shared pieces of the ONNX export tests: small mixed data, and running a model in onnxruntime.

The reference runtime is onnxruntime: every check runs the exported model there and compares its
outputs with the chain's own ``predict`` (scikit-learn's and LightGBM's predict inside it).
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def mixed(n: int, seed: int) -> pd.DataFrame:
    """Return ``n`` rows with numeric, categorical and boolean features, some values missing, and
    targets ``y`` (a number) and ``hit`` (0/1)."""
    rng = np.random.RandomState(seed)
    frame = pd.DataFrame({
        "a": rng.normal(size=n),
        "b": rng.uniform(-2, 2, size=n),
        "count": rng.randint(0, 6, size=n).astype(float),
        "colour": rng.choice(["red", "green", "blue", "amber"], size=n),
        "flag": rng.choice([True, False], size=n),
    })
    frame.loc[rng.choice(n, n // 10, replace=False), "a"] = np.nan
    frame.loc[rng.choice(n, n // 20, replace=False), "colour"] = None
    signal = (2 * frame["a"].fillna(0) + np.sin(3 * frame["b"]) + (frame["colour"] == "red") * 1.5
              + frame["flag"] * 0.5 + 0.3 * frame["count"])
    frame["y"] = signal + rng.normal(scale=0.3, size=n)
    frame["hit"] = (signal + rng.logistic(size=n) > 1.0).astype(int)
    return frame


def onnx_inputs(frame: pd.DataFrame, schema) -> dict[str, np.ndarray]:
    """Return a frame's features as an ONNX runtime takes them: doubles, or strings with '' for missing."""
    out = {}
    for col in schema.columns:
        values = frame[col.name]
        if col.is_categorical:
            out[col.name] = np.asarray(["" if pd.isna(v) else str(v) for v in values], dtype=object)
        else:
            out[col.name] = pd.to_numeric(values).to_numpy(dtype=np.float64, na_value=np.nan)
    return out


def run_onnx(path, frame: pd.DataFrame, schema) -> dict[str, np.ndarray]:
    """Return the outputs of the ONNX model at ``path`` on ``frame``, by name, from onnxruntime."""
    import onnxruntime

    session = onnxruntime.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    names = [o.name for o in session.get_outputs()]
    return dict(zip(names, session.run(names, onnx_inputs(frame, schema)), strict=True))


def relative_gap(got: np.ndarray, want: np.ndarray, scale: float) -> float:
    """Return max |got - want| / max(|want|, scale): the export's float64 tolerance measure."""
    return float(np.max(np.abs(got - want) / np.maximum(np.abs(want), scale)))
