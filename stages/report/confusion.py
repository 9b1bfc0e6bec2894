"""The confusion matrix of a classification chain: true classes against predicted ones, on one part."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..errors import StageSpecError
from ..metrics import confusion_counts, predicted_classes
from ..validation import Part

if TYPE_CHECKING:
    from ..chain import Chain


def confusion_table(chain: Chain, part: Part = "valid", row: int | None = None) -> pd.DataFrame:
    """Return the confusion matrix of ``part`` (train, valid or a revealed test) after chain row ``row``.

    One row per true class and one column per predicted class, both in the chain's class order
    (``chain.classes``), holding row counts, as sklearn.metrics.confusion_matrix lays them out. A
    multiclass chain predicts each row's most probable class; a binary chain the positive class at
    or above its threshold. The validation part of a k-fold chain is every fitting row, out of fold.
    Raise StageSpecError for a regression chain.
    """
    if chain.task == "regression":
        raise StageSpecError("a confusion matrix is for binary and multiclass chains; this chain is a regression")
    _check_part(chain, part)
    y = chain.part_targets(part)
    probability = chain.fitted_values(part, row) if part != "test" else _test_probability(chain, row)
    if chain.task == "binary":
        predicted = (probability >= chain.threshold).astype(np.intp)
    else:
        predicted = predicted_classes(probability)
    n = len(chain.classes)
    counts = confusion_counts(y, predicted, n).astype(np.int64)
    labels = list(chain.classes)
    table = pd.DataFrame(counts, index=pd.Index(labels, name="true"), columns=pd.Index(labels, name="predicted"))
    table.attrs.update(part=part, upto=len(chain.stages) if row is None else int(row), rows=int(len(y)))
    return table


def _check_part(chain: Chain, part: Part) -> None:
    layout = chain.layout
    if part not in ("train", "valid", "test"):
        raise StageSpecError(f"unknown part {part!r} (train, valid or test)")
    if part == "valid" and not (layout.n_valid or layout.is_kfold):
        raise StageSpecError("this chain has no validation part (every row fits)")
    if part == "test" and (layout.n_test == 0 or not chain.test_revealed):
        raise StageSpecError("the test part is locked; reveal it first" if layout.n_test else
                             "this chain has no locked test part")


def _test_probability(chain: Chain, row: int | None) -> np.ndarray:
    from ..outputs import squeeze

    raw = chain.outputs(row)[0][chain.layout.test]
    return squeeze(chain.loss.link(raw))
