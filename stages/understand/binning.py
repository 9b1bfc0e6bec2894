"""Bins of one feature: the rows a binned residual is averaged over.

Bins are learnt from the feature's values on the fitting rows alone (the target plays no
part), so any part can be binned the same way:

- a numeric feature with at most ``max_bins`` distinct values gets one bin per value (the
  edges halfway between neighbours); otherwise the edges are quantiles of the fitting values
  (values that occur in the data, so no bin is empty on them; ties merge bins, so a feature
  with heavy ties gets fewer);
- a categorical feature gets one bin per level of the schema, a boolean one bin for false and
  one for true;
- missing values (and unseen levels, which the matrix holds as missing) have a last bin of
  their own, so ``n_bins`` includes it.

Edges are learnt from at most ``EDGE_ROWS`` fitting values (every k-th beyond that): the
quantiles of 50,000 values are within about 0.2 percentile points of the full data's, which
moves an edge, never a count (the counts are taken on all rows).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..schema import BOOLEAN, CATEGORICAL, ColumnInfo

MISSING = "missing"
EDGE_ROWS = 50_000


@dataclass(frozen=True)
class Bins:
    """How one feature's values become bin numbers 0 .. n_bins - 1 (the last is for missing values).

    ``inner`` are the edges between value bins (a value equal to an edge goes to the bin above).
    ``low`` and ``high`` bound each bin (-inf and inf at the ends; the value itself for a bin per
    value; NaN for levels and for the missing bin). ``labels`` name the bins.
    """

    feature: str
    role: str
    inner: np.ndarray
    labels: tuple[str, ...]
    low: np.ndarray
    high: np.ndarray

    @property
    def n_bins(self) -> int:
        """Return the number of bins, the missing bin included."""
        return len(self.labels)

    def codes(self, values: np.ndarray) -> np.ndarray:
        """Return the bin number of each value (int64; missing values get the last bin)."""
        values = np.asarray(values, dtype=np.float64)
        missing = np.isnan(values)
        last = self.n_bins - 1
        if self.role in (CATEGORICAL, BOOLEAN):
            codes = np.where(missing, last, values).astype(np.int64)
            codes[(codes < 0) | (codes > last)] = last
            return codes
        codes = np.searchsorted(self.inner, np.where(missing, 0.0, values), side="right").astype(np.int64)
        codes[missing] = last
        return codes


def bins_of(column: ColumnInfo, fit_values: np.ndarray, max_bins: int = 20) -> Bins:
    """Return the bins of one feature, learnt from its values on the fitting rows."""
    if isinstance(max_bins, bool) or not isinstance(max_bins, int | np.integer) or max_bins < 2:
        from ..errors import StageSpecError

        raise StageSpecError(f"bins must be a whole number of at least 2, not {max_bins!r}")
    if column.role == CATEGORICAL:
        return _level_bins(column.name, column.role, tuple(column.levels))
    if column.role == BOOLEAN:
        return _level_bins(column.name, column.role, ("false", "true"))
    values = np.asarray(fit_values, dtype=np.float64)
    if len(values) > EDGE_ROWS:
        values = values[:: -(-len(values) // EDGE_ROWS)]
    finite = values[np.isfinite(values)]
    if len(finite) == 0:
        return _level_bins(column.name, column.role, ())
    # a few thousand values tell a feature with many values (most) without sorting them all
    many = len(np.unique(finite[:4096])) > max_bins
    distinct = None if many else np.unique(finite)
    if distinct is not None and len(distinct) <= max_bins:
        inner = (distinct[:-1] + distinct[1:]) / 2.0
        labels = tuple(_number(v) for v in distinct)
        return Bins(column.name, column.role, inner, (*labels, MISSING),
                    np.r_[distinct, np.nan], np.r_[distinct, np.nan])
    cuts = np.quantile(finite, np.linspace(0.0, 1.0, max_bins + 1)[1:-1], method="inverted_cdf")
    inner = np.unique(cuts)
    inner = inner[inner > finite.min()]  # a cut at the smallest value would leave the first bin empty
    low, high = np.r_[-np.inf, inner], np.r_[inner, np.inf]
    texts = [f"below {_number(inner[0])}"]
    texts += [f"{_number(a)} to {_number(b)}" for a, b in zip(inner[:-1], inner[1:], strict=True)]
    texts.append(f"{_number(inner[-1])} and above")
    return Bins(column.name, column.role, inner, (*texts, MISSING), np.r_[low, np.nan], np.r_[high, np.nan])


def _level_bins(name: str, role: str, levels: tuple[str, ...]) -> Bins:
    nothing = np.full(len(levels) + 1, np.nan)
    return Bins(name, role, np.empty(0), (*levels, MISSING), nothing, nothing.copy())


def _number(value: float) -> str:
    return f"{value:.4g}"
