"""The confusion matrix of a classification chain as text, for the residual pane.

The table is ``stages.report.confusion.confusion_table``'s: true classes as rows, predicted ones as
columns, in the chain's class order. The class columns come first (each as wide as its largest
count); the labels are cut to the room left.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from rich.text import Text

from .format import column_text

#: the widest a class name is shown in the confusion matrix
CLASS_WIDTH = 12


def _short(name: str, width: int) -> str:
    return name if len(name) <= width else name[: max(1, width - 1)] + "…"


def confusion_text(table: pd.DataFrame, room: int = 80) -> Text:
    """Return a confusion table (``stages.report.confusion``) as text: one line per true class with its
    counts under the predicted classes (the diagonal, the rows predicted right, in bold) and the share
    of its rows predicted right; class names are cut to fit ``room`` cells."""
    counts = table.to_numpy(dtype=np.int64)
    names = [str(c) for c in table.columns]
    k = max(1, len(names))
    label_width = min(CLASS_WIDTH, max(len("true"), *(len(n) for n in names)))
    narrowest = max(len(str(int(counts.max()))) if counts.size else 1, 3)
    # the class columns first: at least their counts; then the labels, cut to what is left
    label_width = max(4, min(label_width, room - k * (narrowest + 1) - 7))
    share = (room - label_width - 7) // k - 1
    width = max(narrowest, min(share, max(len(n) for n in names)))
    totals = counts.sum(axis=1)
    right = column_text([(counts[i, i] / t) if t else float("nan") for i, t in enumerate(totals)],
                        digits=3, missing="-")
    text = Text(no_wrap=True, overflow="ellipsis")
    header = "true".ljust(label_width) + " " + " ".join(_short(n, width).rjust(width) for n in names)
    text.append(header + "  right\n", style="bold")
    for i, name in enumerate(names):
        text.append(_short(name, label_width).ljust(label_width))
        for j in range(len(names)):
            text.append(" " + str(int(counts[i, j])).rjust(width), style="bold" if i == j else "")
        text.append(f"  {right[i]:>5}\n")
    return text
