"""The residual scan: which features still carry residual signal, scored on rows it did not fit on.

For each feature the scan does what a one-feature binned stage added next would do: it takes
the mean of the fitting rows' residuals in each bin of the feature (``binning``), and measures
on the scored rows (the validation part, or the test part once revealed) how much of the
squared residual those bin means remove:

    score = mean over scored rows of [r^2 - (r - m_bin)^2]

where r is the loss's residual (its negative gradient, what the next stage is fit to; y - F
for squared loss, y - p for log loss; on the log link, poisson, gamma and tweedie, the response
residual y - mu, so the scan works on the response scale) and m_bin the fitting rows' mean
residual in the row's bin. For squared loss this is exactly the fall in validation MSE such a stage would bring. A
feature with no signal left scores near zero or below it (bin means of noise add error).
``share`` is the score over the mean squared residual of the scored rows.

The scan also asks whether the residuals' *spread* depends on the feature (noise that widens
along it): ``spread_score`` is the share of the variation of the squared deviations
(r - m_bin)^2 that their bin means on the fitting rows explain on the scored rows.

Noise band: the fitting rows' residuals are shuffled ``permutations`` times (seeded), which
breaks any tie between residual and feature while keeping the bins' sizes and the scored rows
as they are; each shuffle is scored the same way.
``band`` (and ``spread_band``) is the mean of those null scores plus three of their standard
deviations (the three-sigma rule, common practice). A score above its band is marked
``stands_out``.

For k-fold chains the validation part is out of fold: for each fold the bin means come from
that fold's fitting rows and residuals, and are scored on the fold's held-out rows.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..errors import StageSpecError
from ..parts import part_rows
from ..validation import Part
from .binning import Bins, bins_of
from .cache import remembered
from .rows import check_part, check_upto, feature_index, one_output, part_positions, sample_rows

if TYPE_CHECKING:
    from ..chain import Chain

#: how many noise standard deviations above the noise mean a score must be to stand out
BAND_SIGMAS = 3.0


@dataclass(frozen=True)
class Block:
    """Rows whose bin means are fit (``fit``) and rows they are scored on (``scored``), as chain
    positions, with the loss's residual on each and the residual users see on the scored rows."""

    fit: np.ndarray
    fit_residual: np.ndarray
    scored: np.ndarray
    scored_residual: np.ndarray
    shown: np.ndarray


def residual_scan(chain: Chain, upto: int | None = None, part: Part = "valid", *, bins: int = 20,
                  sample: int | None = None, permutations: int = 20, seed: int | None = None) -> pd.DataFrame:
    """Return one row per feature, highest score first: ``feature``, ``score``, ``share``, ``band``,
    ``stands_out``, ``spread_score``, ``spread_band``, ``spread_stands_out``, ``role``, ``bins``,
    ``fit_rows``, ``scored_rows``, and per bin (tuples, in bin order) ``bin_labels``, ``bin_rows``,
    ``bin_mean`` (mean residual users see, on the scored rows) and ``bin_spread`` (its standard
    deviation).

    ``upto`` is the chain row scanned (default the last stage; 0 is the start value). ``part``
    is valid or test (the scan never scores rows it fit on). ``sample`` bounds the fitting and
    the scored rows used (a seeded draw); ``fit_rows`` and ``scored_rows`` say how many were.
    """
    one_output(chain.task, "the residual scan")
    row = check_upto(len(chain.stages), upto)
    if part == "train":
        raise StageSpecError("the scan scores rows it did not fit on: part must be 'valid' or 'test'")
    check_part(chain, part)
    if isinstance(permutations, bool) or not isinstance(permutations, int) or permutations < 2:
        raise StageSpecError(f"permutations must be a whole number of at least 2, not {permutations!r}")
    seed = chain.seed if seed is None else int(seed)
    question = ("scan", part, bins, sample, permutations, seed)
    return remembered(chain, list(chain.stages[:row]),
                      question, lambda: _scan(chain, row, part, bins, sample, permutations, seed))


def binned_residuals(chain: Chain, feature: str, upto: int | None = None, part: Part = "valid", *,
                     bins: int = 20, sample: int | None = None, seed: int | None = None) -> pd.DataFrame:
    """Return one row per bin of ``feature`` (the scan's bins): ``bin``, ``low``, ``high``, ``value``
    (mean feature value of the part's rows in the bin), ``rows``, ``mean_residual``, ``spread``
    (standard deviation of the residual), and ``fit_rows`` and ``fit_mean`` (the fitting rows' count
    and mean residual in the bin, what a binned stage would add). Any part may be shown, train too.
    """
    one_output(chain.task, "binned residuals")
    row = check_upto(len(chain.stages), upto)
    check_part(chain, part)
    j = feature_index(chain.schema, feature)
    seed = chain.seed if seed is None else int(seed)
    question = ("binned", feature, part, bins, sample, seed)
    return remembered(chain, list(chain.stages[:row]), question,
                      lambda: _binned(chain, j, row, part, bins, sample, seed))


# ----------------------------------------------------------------------------- the rows


def scan_blocks(chain: Chain, row: int, part: Part, sample: int | None, seed: int) -> list[Block]:
    """Return the blocks of a scan of ``part`` after chain row ``row`` (one per fold for k-fold)."""
    layout, loss, y = chain.layout, chain.loss, chain.y
    outputs = tuple(output[:, 0] for output in chain.outputs(row))  # one raw score per row
    if part == "valid" and layout.is_kfold:
        pairs = [(track.fit_positions(), np.asarray(track.evaluate), output)
                 for track, output in zip(layout.tracks[1:], outputs[1:], strict=True)]
    else:
        pairs = [(layout.tracks[0].fit_positions(), part_positions(chain, part), outputs[0])]
    share = None if sample is None else max(1, -(-int(sample) // len(pairs)))
    blocks = []
    for b, (fit, scored, output) in enumerate(pairs):
        fit = _bounded(fit, share, seed + 2 * b)
        scored = _bounded(scored, share, seed + 2 * b + 1)
        blocks.append(Block(fit, loss.scan_residuals(y[fit], output[fit])[0], scored,
                            *loss.scan_residuals(y[scored], output[scored])))
    return blocks


def _bounded(positions: np.ndarray, sample: int | None, seed: int) -> np.ndarray:
    chosen = sample_rows(len(positions), sample, seed)
    return positions if chosen is None else positions[chosen]


def feature_bins(chain: Chain, j: int, bins: int) -> Bins:
    """Return the bins of feature ``j``, learnt from its values on the main track's fitting rows."""
    fit = chain.layout.tracks[0].fit_positions()
    return bins_of(chain.schema.columns[j], chain.matrix[fit, j], bins)


# ----------------------------------------------------------------------------- the scan


@dataclass
class FeatureBins:
    """One feature's bins reduced to what its scores need, per block: the fitting rows per bin,
    and the scored rows' power sums (``ScoredBins``)."""

    counts: list[np.ndarray]
    scored: list[ScoredBins]


def _scan(chain: Chain, row: int, part: Part, n_bins: int, sample: int | None, permutations: int,
          seed: int) -> pd.DataFrame:
    blocks = scan_blocks(chain, row, part, sample, seed)
    scored_square = sum(float(np.sum(block.scored_residual ** 2)) for block in blocks)
    n_scored = sum(len(block.scored) for block in blocks)
    records, reduced = [], []
    for j, column in enumerate(chain.schema.columns):
        bins = feature_bins(chain, j, n_bins)
        record, feature = _feature_record(chain, j, bins, blocks)
        record["role"] = column.role
        records.append(record)
        reduced.append(feature)
    null, spread_null = _null_scores(blocks, reduced, permutations, seed)
    for record, gains, spreads in zip(records, null, spread_null, strict=True):
        real = record.pop("gain")
        record["score"] = real / n_scored
        record["share"] = real / scored_square if scored_square > 0 else np.nan
        record["band"] = _band(gains / n_scored)
        record["stands_out"] = bool(record["score"] > record["band"])
        record["spread_band"] = _band(np.array([_share(*pair) for pair in spreads]))
        record["spread_stands_out"] = bool(record["spread_score"] > record["spread_band"])
    table = pd.DataFrame(records)[COLUMNS]
    return table.sort_values(["score", "feature"], ascending=[False, True], kind="mergesort").reset_index(drop=True)


COLUMNS = ["feature", "score", "share", "band", "stands_out", "spread_score", "spread_band", "spread_stands_out",
           "role", "bins", "fit_rows", "scored_rows", "bin_labels", "bin_rows", "bin_mean", "bin_spread"]


def _feature_record(chain: Chain, j: int, bins: Bins, blocks: list[Block]) -> tuple[dict, FeatureBins]:
    """Return one feature's scan row (its gain not yet divided by the rows) and its reduced bins."""
    n = bins.n_bins
    gain, spread = 0.0, np.zeros(2)
    feature = FeatureBins([], [])
    shown_rows, shown_sum, shown_square = np.zeros(n), np.zeros(n), np.zeros(n)
    for block in blocks:
        fit_codes = bins.codes(chain.matrix[block.fit, j])
        codes = bins.codes(chain.matrix[block.scored, j])
        scored = ScoredBins.of(codes, block.scored_residual, n)
        counts = np.bincount(fit_codes, minlength=n).astype(np.float64)
        sums = np.bincount(fit_codes, weights=block.fit_residual, minlength=n)
        squares = np.bincount(fit_codes, weights=block.fit_residual ** 2, minlength=n)
        block_gain, block_spread = scored.gains(counts, sums, squares)
        gain += block_gain
        spread += block_spread
        feature.counts.append(counts)
        feature.scored.append(scored)
        shown_rows += np.bincount(codes, minlength=n)
        shown_sum += np.bincount(codes, weights=block.shown, minlength=n)
        shown_square += np.bincount(codes, weights=block.shown ** 2, minlength=n)
    mean = _ratio(shown_sum, shown_rows)
    deviation = np.sqrt(np.maximum(_ratio(shown_square, shown_rows) - mean ** 2, 0.0))
    record = {
        "feature": bins.feature, "gain": gain, "spread_score": _share(*spread), "bins": n,
        "fit_rows": sum(len(b.fit) for b in blocks), "scored_rows": sum(len(b.scored) for b in blocks),
        "bin_labels": bins.labels, "bin_rows": tuple(int(c) for c in shown_rows),
        "bin_mean": tuple(float(v) for v in mean), "bin_spread": tuple(float(v) for v in deviation),
    }
    return record, feature


def _null_scores(blocks: list[Block], features: list[FeatureBins], permutations: int,
                 seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Return each feature's gains (features x shuffles) and spread pairs (features x shuffles x 2)
    with the fitting rows' residuals shuffled.

    Shuffled, a bin of n fitting rows holds a uniformly random n of the residuals: in law the
    same as n consecutive residuals of one shuffled vector. So one shuffle and its running sums
    serve every feature, each bin's sums read off in O(1).
    """
    rng = np.random.RandomState(seed)
    gains = np.zeros((len(features), permutations))
    spreads = np.zeros((len(features), permutations, 2))
    for b, block in enumerate(blocks):
        ends = [np.r_[0, np.cumsum(feature.counts[b])].astype(np.int64) for feature in features]
        for p in range(permutations):
            shuffled = block.fit_residual[rng.permutation(len(block.fit))]
            running = np.r_[0.0, np.cumsum(shuffled)]
            running_square = np.r_[0.0, np.cumsum(shuffled ** 2)]
            for f, feature in enumerate(features):
                edge = ends[f]
                gain, spread = feature.scored[b].gains(feature.counts[b], np.diff(running[edge]),
                                                       np.diff(running_square[edge]))
                gains[f, p] += gain
                spreads[f, p] += spread
    return gains, spreads


@dataclass(frozen=True)
class ScoredBins:
    """The scored rows of one block reduced to per-bin power sums of their residual (rows, sum of r,
    r^2, r^3, r^4): every score of the scan is a sum over bins of these, whatever the bin means."""

    sums: np.ndarray  # shape (5, n_bins)

    @classmethod
    def of(cls, codes: np.ndarray, residual: np.ndarray, n_bins: int) -> ScoredBins:
        """Return the per-bin power sums of the scored residuals."""
        powers: list[np.ndarray] = [np.bincount(codes, minlength=n_bins).astype(np.float64)]
        term = np.ones_like(residual)
        for _ in range(4):
            term = term * residual
            powers.append(np.bincount(codes, weights=term, minlength=n_bins))
        return cls(np.vstack(powers))

    def gains(self, counts: np.ndarray, sums: np.ndarray, squares: np.ndarray) -> tuple[float, np.ndarray]:
        """Return, given the fitting rows' count, sum and sum of squares of residuals per bin, the
        squared residual the bin means m remove on the scored rows, and (explained, total)
        variation of the scored rows' squared deviations d = (r - m)^2 when each bin predicts d by
        its fitting rows' mean rather than by one overall mean."""
        n0, s1, s2, s3, s4 = self.sums
        m = _ratio(sums, counts)
        gain = float(np.sum(2.0 * m * s1 - n0 * m ** 2))  # sum of r^2 - (r - m)^2
        fit_deviation = squares - counts * m ** 2
        overall = float(np.sum(fit_deviation) / max(float(np.sum(counts)), 1.0))
        per_bin = np.where(counts > 0, _ratio(fit_deviation, counts), overall)
        d1 = s2 - 2.0 * m * s1 + n0 * m ** 2                                        # sum of d per bin
        d2 = s4 - 4.0 * m * s3 + 6.0 * m ** 2 * s2 - 4.0 * m ** 3 * s1 + n0 * m ** 4  # sum of d^2 per bin
        total = float(np.sum(d2 - 2.0 * overall * d1 + n0 * overall ** 2))           # sum of (d - overall)^2
        explained = float(np.sum(n0 * (overall ** 2 - per_bin ** 2) - 2.0 * d1 * (overall - per_bin)))
        return gain, np.array([explained, total])


def _share(explained: float, total: float) -> float:
    return explained / total if total > 0 else np.nan


def _band(null: np.ndarray) -> float:
    finite = null[np.isfinite(null)]
    if len(finite) < 2:
        return np.nan
    return float(np.mean(finite) + BAND_SIGMAS * np.std(finite, ddof=1))


def _ratio(top: np.ndarray, bottom: np.ndarray) -> np.ndarray:
    return np.divide(top, bottom, out=np.zeros_like(top, dtype=np.float64), where=bottom > 0)


# ----------------------------------------------------------------------------- one feature


def _binned(chain: Chain, j: int, row: int, part: Part, n_bins: int, sample: int | None, seed: int) -> pd.DataFrame:
    bins = feature_bins(chain, j, n_bins)
    positions = part_positions(chain, part)
    y_part, raw_part = part_rows(chain, part, row)
    shown = chain.loss.scan_residuals(y_part, raw_part[:, 0])[1]  # what the scan shows: y - mu on the log link
    chosen = sample_rows(len(positions), sample, seed)
    if chosen is not None:
        positions, shown = positions[chosen], shown[chosen]
    values = chain.matrix[positions, j]
    codes = bins.codes(values)
    n = bins.n_bins
    rows = np.bincount(codes, minlength=n).astype(np.float64)
    mean = _ratio(np.bincount(codes, weights=shown, minlength=n), rows)
    square = _ratio(np.bincount(codes, weights=shown ** 2, minlength=n), rows)
    present = ~np.isnan(values)
    value = _ratio(np.bincount(codes[present], weights=values[present], minlength=n),
                   np.bincount(codes[present], minlength=n).astype(np.float64))
    fit_positions = chain.layout.tracks[0].fit_positions()
    fit_codes = bins.codes(chain.matrix[fit_positions, j])
    fit_residual = chain.loss.scan_residuals(chain.y[fit_positions], chain.outputs(row)[0][fit_positions, 0])[0]
    fit_rows = np.bincount(fit_codes, minlength=n).astype(np.float64)
    empty = rows == 0
    table = pd.DataFrame({
        "bin": list(bins.labels), "low": bins.low, "high": bins.high,
        "value": np.where(np.bincount(codes[present], minlength=n) > 0, value, np.nan),
        "rows": rows.astype(np.int64),
        "mean_residual": np.where(empty, np.nan, mean),
        "spread": np.where(empty, np.nan, np.sqrt(np.maximum(square - mean ** 2, 0.0))),
        "fit_rows": fit_rows.astype(np.int64),
        "fit_mean": np.where(fit_rows > 0, _ratio(np.bincount(fit_codes, weights=fit_residual, minlength=n), fit_rows),
                             np.nan),
    })
    table.attrs.update(feature=bins.feature, role=bins.role, part=part, upto=row, rows=int(len(positions)))
    return table
