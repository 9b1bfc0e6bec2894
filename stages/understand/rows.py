"""Which rows a question is about: the parts of a chain, the chain state asked for, and samples.

A part is named as the user names it: ``train`` (the fitting rows), ``valid`` (the holdout
rows, or for k-fold every fitting row scored out of fold) and ``test`` (only once revealed).
Positions are chain positions (rows of ``chain.matrix``), in the order ``chain.residuals``
uses for the same part.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import scoring
from ..errors import DataError, StageSpecError
from ..validation import Part

if TYPE_CHECKING:
    from ..chain import Chain

PARTS = ("train", "valid", "test")


def check_upto(n_stages: int, upto: int | None) -> int:
    """Return the chain row asked for (0 is the start value; None means the last stage)."""
    if upto is None:
        return n_stages
    if isinstance(upto, bool) or not isinstance(upto, int | np.integer) or not 0 <= upto <= n_stages:
        raise StageSpecError(f"there is no stage {upto!r}; the chain has {n_stages} (0 is the start value)")
    return int(upto)


def check_stage(n_stages: int, stage: int) -> int:
    """Return ``stage`` as a 1-based stage number; raise StageSpecError when there is no such stage."""
    if isinstance(stage, bool) or not isinstance(stage, int | np.integer) or not 1 <= stage <= n_stages:
        raise StageSpecError(f"there is no stage {stage!r}; the chain has {n_stages} (stages count from 1)")
    return int(stage)


def check_part(chain: Chain, part: Part) -> Part:
    """Return ``part`` when the chain has rows in it; raise StageSpecError otherwise."""
    if part not in PARTS:
        raise StageSpecError(f"unknown part {part!r} (train, valid or test)")
    layout = chain.layout
    if part == "valid" and not (layout.n_valid or layout.is_kfold):
        raise StageSpecError("this chain has no validation part (every row fits)")
    if part == "test":
        if layout.n_test == 0:
            raise StageSpecError("this chain has no locked test part")
        if not chain.test_revealed:
            raise StageSpecError("the test part is locked; reveal it first")
    return part


def part_positions(chain: Chain, part: Part) -> np.ndarray:
    """Return the chain positions of ``part``'s rows, in the order ``chain.residuals(part)`` uses."""
    layout = chain.layout
    check_part(chain, part)
    if part == "train" or (part == "valid" and layout.is_kfold):
        return np.arange(layout.n_train)
    chosen = layout.valid if part == "valid" else layout.test
    return np.arange(chosen.start, chosen.stop)


def one_output(task: str, what: str) -> None:
    """Raise StageSpecError naming ``what`` for a multiclass chain: it reads one raw score per row."""
    if task == "multiclass":
        raise StageSpecError(f"{what} is for regression and binary chains; this chain is multiclass")


def part_raw(chain: Chain, part: Part, row: int) -> np.ndarray:
    """Return the chain's (n, K) raw output on ``part`` after row ``row`` (out of fold for k-fold validation)."""
    outputs = chain.outputs(row)
    layout = chain.layout
    if part == "valid":
        return scoring.validation_raw(layout, outputs)
    return outputs[0][part_positions(chain, part)]


def frame_positions(chain: Chain, positions: np.ndarray) -> np.ndarray:
    """Return the rows of the frame the chain was built from (0-based) at chain ``positions``."""
    return np.asarray(chain.prepared.rows)[chain.layout.order[positions]]


def sample_rows(n: int, sample: int | None, seed: int) -> np.ndarray | None:
    """Return sorted positions of at most ``sample`` of ``n`` rows drawn with ``seed``, or None for all.

    The draw costs in proportion to the sample, not to ``n`` (numpy's Generator draws a few rows
    of many without shuffling them all), so a bounded question about ten million rows stays quick
    and never holds the interpreter for the length of a shuffle.
    """
    if sample is None:
        return None
    if isinstance(sample, bool) or not isinstance(sample, int | np.integer) or sample < 1:
        raise StageSpecError(f"sample must be a whole number of at least 1, not {sample!r}")
    if sample >= n:
        return None
    return np.sort(np.random.default_rng(seed).choice(n, size=int(sample), replace=False, shuffle=False))


def feature_index(schema: Any, feature: str) -> int:
    """Return the matrix column of ``feature``; raise StageSpecError naming it when it is not a feature."""
    if not isinstance(feature, str) or feature not in schema.names:
        raise StageSpecError(f"{feature!r} is not one of the chain's features")
    return schema.names.index(feature)


def encode_target(schema: Any, values: pd.Series, source: str = "data") -> np.ndarray:
    """Return a frame's target column as the chain's y: numbers for regression, 1.0 for the positive
    class of a binary chain and 0.0 for the other, the class code of a multiclass chain, NaN where
    it is missing.

    Raise DataError naming the first value that is neither a number (regression) nor one of the
    chain's classes (a class the chain never saw cannot be scored).
    """
    missing = values.isna().to_numpy(dtype=bool)
    if schema.task == "multiclass":
        lookup = {label: float(code) for code, label in enumerate(schema.classes)}
        codes = values.map(_class_text).map(lookup).to_numpy(dtype=np.float64, na_value=np.nan)
        bad = np.isnan(codes) & ~missing
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            shown = ", ".join(repr(c) for c in schema.classes[:8]) + (", ..." if len(schema.classes) > 8 else "")
            raise DataError(f"{source}: target {schema.target!r} holds {values.iloc[first]!r} (row {first + 1}), "
                            f"a class the chain never saw (its classes: {shown})")
        return codes
    if schema.task == "binary":
        text = values.map(_class_text)
        positive = (text == schema.classes[1]).to_numpy(dtype=bool)
        known = positive | (text == schema.classes[0]).to_numpy(dtype=bool)
        bad = ~known & ~missing
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            raise DataError(f"{source}: target {schema.target!r} holds {values.iloc[first]!r} (row {first + 1}), "
                            f"not one of the chain's classes {schema.classes[0]!r} and {schema.classes[1]!r}")
        return np.where(missing, np.nan, positive.astype(np.float64))
    numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    bad = np.isnan(numbers) & ~missing
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise DataError(f"{source}: target {schema.target!r} is not numeric (row {first + 1}: {values.iloc[first]!r})")
    return numbers


def _class_text(value: Any) -> Any:
    """Return a class label as the schema writes it: whole floats lose their ``.0``."""
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return None
    if isinstance(value, float | np.floating) and float(value).is_integer():
        return str(int(value))
    return str(value)
