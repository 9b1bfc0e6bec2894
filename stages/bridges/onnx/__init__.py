"""The chain as one ONNX model, with its preprocessing, checked against ``predict`` before it is written.

``export_onnx(fitted, "model.onnx")`` writes ``model.onnx`` and ``model.probe.csv`` (the probe
rows' inputs and the chain's own outputs on them) and returns an ``OnnxReport``. The pieces, one
job per module:

- ``builder.py``: the graph under construction (names, constants, opsets), over ``onnx.helper``;
- ``columns.py``: one input per feature, each turned into its column of the schema's matrix;
- ``designs.py``: the linear and spline kinds' preprocessing (imputation, scaling, one-hot, basis);
- ``trees.py``: scikit-learn and LightGBM trees as one float64 ``TreeEnsemble`` node;
- ``neighbours.py``: the k-NN stage; ``sklearn_stage.py``: ``sklearn:`` stages through skl2onnx;
- ``converters.py``: one converter per kind; ``compose.py``: the chain, the raw score, the head;
- ``probe.py``: the probe rows, the expected outputs, the comparison; ``writing.py``: the writes.

The extra ``remnant[onnx]`` (onnx, onnxruntime, skl2onnx) is needed; without it the export is an
ExportError that names it.
"""

from __future__ import annotations

import importlib
import io
import os
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ...errors import ExportError
from ...predictor import FittedChain

#: the distributions the export needs (the ``onnx`` extra), by module name
EXTRA = {"onnx": "onnx", "onnxruntime": "onnxruntime", "skl2onnx": "skl2onnx"}


@dataclass(frozen=True)
class StageReport:
    """One stage of the exported model: its kind and the precision its operators compute in."""

    number: int
    kind: str
    precision: str
    note: str = ""


@dataclass(frozen=True)
class OnnxReport:
    """What the export wrote and what it measured on the probe rows."""

    path: str
    probe_path: str
    rows: int
    largest_difference: float
    share_of_tolerance: float
    precision: str
    tolerance: str
    stages: tuple[StageReport, ...]
    runtime: str
    own_rows: int = 0        # probe rows from the chain file or the caller (the rest are made from them)

    def lines(self) -> list[str]:
        """Return the report as lines of text for the command line."""
        out = [f"wrote {self.path} ({self.precision} throughout)" if self.precision == "float64"
               else f"wrote {self.path} (float32 where an operator forces it)",
               f"checked on {self.rows} probe rows with {self.runtime}: the largest difference from the "
               f"chain's predict is {self.largest_difference:.3g} ({self.share_of_tolerance:.2g} of the "
               f"tolerance, {self.tolerance})",
               f"probe file: {self.probe_path} (inputs and the chain's own outputs, to check the model where it runs)"]
        out += [f"stage {s.number} ({s.kind}): {s.note}" for s in self.stages if s.note]
        if not self.own_rows:
            out.append("note: the chain has no probe rows of its own (it was not loaded from a chain file); "
                       "pass rows= to check the model on rows of your data")
        return out


def require_extra() -> None:
    """Raise ExportError naming the ``remnant[onnx]`` extra when one of its packages is not installed."""
    for module, distribution in EXTRA.items():
        try:
            importlib.import_module(module)
        except ImportError:
            raise ExportError(f"the ONNX export needs the optional extra: pip install 'remnant[onnx]' "
                              f"({distribution} is not installed)") from None


def probe_path_for(path: str) -> str:
    """Return the probe file's path beside the model: ``model.onnx`` -> ``model.probe.csv``."""
    root, suffix = os.path.splitext(path)
    return f"{root if suffix.lower() == '.onnx' else path}.probe.csv"


def export_onnx(fitted: FittedChain, path: str | os.PathLike, *, stored_rows: np.ndarray | None = None,
                rows: pd.DataFrame | None = None) -> OnnxReport:
    """Write ``fitted`` as an ONNX model at ``path`` and its probe file beside it; return the report.

    ``stored_rows`` are the chain file's probe rows (schema matrix rows), ``rows`` any frame of
    feature values to check on as well. Nothing is written unless onnxruntime's outputs on the
    probe rows are within the tolerance of ``predict`` (see ``probe.py``). Raise ExportError when
    a stage does not convert, the model would predict differently, or a file cannot be written.
    """
    require_extra()
    from . import probe, writing
    from .compose import chain_graph

    target = os.fspath(path)
    probe_target = probe_path_for(target)
    writing.check_target(target, "the ONNX model")
    writing.check_target(probe_target, "the probe file")
    built = chain_graph(fitted)
    model_bytes = built.model.SerializeToString()
    table_rows = probe.with_exposure(fitted, probe.probe_rows(fitted.schema, stored_rows, rows))
    exposure = probe.exposure_input(fitted)
    want = probe.expected(fitted, table_rows)
    got = run_model(model_bytes, probe.feeds(fitted.schema, table_rows, exposure))
    float32 = built.precision == "float32"
    result = probe.compare(fitted, got, want, float32)
    if not result.passed:
        raise ExportError(_refusal(fitted, table_rows, result, float32))
    buffer = io.StringIO()
    probe.probe_table(fitted.schema, table_rows, want, exposure).to_csv(buffer, index=False)
    writing.write_files({probe_target: ("the probe file", buffer.getvalue().encode("utf-8")),
                         target: ("the ONNX model", model_bytes)})
    import onnxruntime

    tolerance = (f"{probe.RTOL_FLOAT32:g} of the target's spread" if float32 else
                 f"{probe.RTOL_FLOAT64:g} relative")
    stages = tuple(StageReport(k, s.kind, g.precision, g.note)
                   for k, (s, g) in enumerate(zip(fitted.stages, built.stages, strict=True), start=1))
    own = (0 if stored_rows is None else len(stored_rows)) + (0 if rows is None else len(rows))
    return OnnxReport(target, probe_target, result.rows, result.largest, result.largest_share, built.precision,
                      tolerance, stages, f"onnxruntime {onnxruntime.__version__}", own)


#: rows scored at once when checking (a k-NN stage's graph holds rows x fitting rows distances)
CHECK_BATCH = 64


def run_model(model: bytes, inputs: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Return the outputs of the serialised ONNX ``model`` on ``inputs`` in onnxruntime, by name,
    scored CHECK_BATCH rows at a time."""
    import onnxruntime

    session = onnxruntime.InferenceSession(model, providers=["CPUExecutionProvider"])
    names = [o.name for o in session.get_outputs()]
    total = len(next(iter(inputs.values())))
    parts = [session.run(names, {k: v[start:start + CHECK_BATCH] for k, v in inputs.items()})
             for start in range(0, total, CHECK_BATCH)]
    return {name: np.concatenate([part[i] for part in parts]) for i, name in enumerate(names)}


def _refusal(fitted: FittedChain, rows: pd.DataFrame, result: Any, float32: bool) -> str:
    """Return the error naming the first stage whose raw score differs from the chain's own."""
    detail = f"the model differs from predict by {result.largest:.3g} on probe row {result.worst_row + 1}"
    if result.labels_differ:
        detail = f"the model gives another class than predict on {result.labels_differ} probe rows"
    stage = _first_stage_differing(fitted, rows, float32)
    where = f", starting at stage {stage} ({fitted.stages[stage - 1].kind})" if stage else ""
    return f"cannot export: {detail}{where}; nothing was written"


def _first_stage_differing(fitted: FittedChain, rows: pd.DataFrame, float32: bool) -> int | None:
    """Return the first stage after which the model's raw score is off the chain's, or None."""
    import warnings

    from ...predictor import UnseenLevelsWarning, UnseenMissingWarning
    from . import probe
    from .compose import chain_graph

    got = run_model(chain_graph(fitted, each_stage=True).model.SerializeToString(),
                    probe.feeds(fitted.schema, rows, probe.exposure_input(fitted)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelsWarning)
        warnings.simplefilter("ignore", UnseenMissingWarning)
        after = fitted.raw_after_each_stage(fitted.encode(rows, source="probe rows"))
    scale = probe.spread(fitted)
    for k in range(1, len(fitted.stages) + 1):
        want = after[:, k] if fitted.outputs > 1 else after[:, k, 0]
        allowed = probe.RTOL_FLOAT32 * scale if float32 else probe.RTOL_FLOAT64 * np.maximum(np.abs(want), scale)
        if np.any(~(np.abs(got[f"after_{k}"] - want) <= allowed)):
            return k
    return None
