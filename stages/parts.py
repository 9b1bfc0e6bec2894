"""The rows of one part of a chain (train, valid, test) and what the chain gives on them.

``Chain.residuals``, ``fitted_values``, ``part_targets`` and ``histogram`` read through these
functions, over the chain's public state (its outputs, layout, targets, loss and schema). For a
multiclass chain the residuals are (n, K), one column per class, and ``of_class`` picks one.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from . import scoring
from .errors import ChainStateError, StageSpecError
from .outputs import squeeze
from .validation import Part

if TYPE_CHECKING:
    from .chain import Chain


def part_rows(chain: Chain, part: Part, row: int | None) -> tuple[np.ndarray, np.ndarray]:
    """Return the targets and (n, K) raw outputs of ``part`` after row ``row`` (the test part once revealed)."""
    outputs = chain.outputs(row)
    layout = chain.layout
    if part == "train":
        return chain.y[layout.train], outputs[0][layout.train]
    if part == "valid":
        return scoring.validation_y(layout, chain.y), scoring.validation_raw(layout, outputs)
    if part == "test":
        if not chain.test_revealed:
            raise ChainStateError("the test part is locked; reveal it first")
        return chain.y[layout.test], outputs[0][layout.test]
    raise StageSpecError(f"unknown part {part!r} (train, valid or test)")


def targets(chain: Chain, part: Part) -> np.ndarray:
    """Return the targets of ``part`` in the order residuals and fitted values use."""
    layout = chain.layout
    if part == "train":
        return chain.y[layout.train]
    if part == "valid":
        return scoring.validation_y(layout, chain.y)
    if part == "test":
        return chain.y[layout.test]
    raise StageSpecError(f"unknown part {part!r} (train, valid or test)")


def class_index(chain: Chain, of_class: object) -> int:
    """Return the position of class ``of_class`` (its label, as text or as the value it was) in the
    chain's classes; raise StageSpecError naming the classes when it is not one."""
    from .predictor import class_text

    text, classes = class_text(of_class), chain.schema.classes
    if text not in classes:
        shown = ", ".join(repr(c) for c in classes[:12])
        raise StageSpecError(f"{of_class!r} is not one of the classes of {chain.schema.target!r} ({shown})")
    return classes.index(text)


def residuals(chain: Chain, part: Part, row: int | None, of_class: object = None) -> np.ndarray:
    """Return target minus prediction on ``part`` (the pseudo-residuals, (n, K), of a multiclass chain;
    the column of ``of_class`` when given)."""
    y, raw = part_rows(chain, part, row)
    values = squeeze(chain.loss.display_residual(y, raw))
    if of_class is None:
        return values
    if chain.task != "multiclass":
        raise StageSpecError("of_class is for multiclass chains")
    return values[:, class_index(chain, of_class)]


def fitted_values(chain: Chain, part: Part, row: int | None) -> np.ndarray:
    """Return the predictions on ``part`` (train or valid): values, probabilities, or (n, K) class probabilities."""
    if part not in ("train", "valid"):
        raise StageSpecError(f"unknown part {part!r} (train or valid)")
    return squeeze(chain.loss.link(part_rows(chain, part, row)[1]))


def histogram(chain: Chain, row: int | None, parts: tuple[Part, ...], bins: int | str, max_bins: int,
              of_class: object = None) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Return residual counts per part over shared bin edges (summed row weights on a weighted chain), and
    the edges; a multiclass chain without
    ``of_class`` counts each row's own class's pseudo-residual, 1 - p_y (``scoring.shown_residual``)."""
    if chain.task == "multiclass" and of_class is None:
        values = [scoring.shown_residual(chain.loss, *part_rows(chain, p, row)) for p in parts]
    else:
        values = [residuals(chain, p, row, of_class) for p in parts]
    weights = None if chain.weight is None else [_weights_of(chain, p) for p in parts]
    counts, edges = scoring.histogram(values, bins=bins, max_bins=max_bins, weights=weights)
    return dict(zip(parts, counts, strict=True)), edges


def _weights_of(chain: Chain, part: Part) -> np.ndarray:
    weights = part_weights(chain, part)
    return np.ones(len(targets(chain, part))) if weights is None else weights


def part_weights(chain: Chain, part: Part) -> np.ndarray | None:
    """Return the row weights of ``part`` in the order residuals use (None when every row counts once)."""
    if chain.weight is None:
        return None
    layout = chain.layout
    if part == "valid":
        return scoring.validation_y(layout, chain.weight)
    return chain.weight[layout.train if part == "train" else layout.test]
