"""Nearest fitting rows with ties broken by one rule: distance first, then the fitting row's position.

scikit-learn's searches (brute force, k-d tree, ball tree) find the neighbours quickly but break
ties at the k-th distance in whatever order the search met the rows, and brute force rounds
distances differently for different batches of queries. On integer-valued features many rows tie,
so the same row could get other neighbours when predicted alone than when predicted with others.

Here scikit-learn's search proposes candidates (more than k); each candidate's distance is then
computed again pair by pair, summing over the columns in a fixed order, so it does not depend on
the batch; the k nearest are the first k by (that distance, row position). Distances whose sums
``sum_j |q_j - x_j|^p`` agree to TIE_DECIMALS decimals (on the standardised design) count as
tied: two rows at the same true distance often differ in the last bits of their sums. When the
candidates might not hold every row tied at the k-th distance, the search is widened for those
queries.
"""

from __future__ import annotations

from typing import Any

import numpy as np

#: candidates asked of the search beyond k, at first
MARGIN = 16
#: query rows x candidates held at once (8 bytes each: 32 MB)
BLOCK_CELLS = 4 * 1024 * 1024
#: decimals to which two distance sums must agree to count as tied
TIE_DECIMALS = 9


def reduced_distances(queries: np.ndarray, matrix: np.ndarray, candidates: np.ndarray, p: float) -> np.ndarray:
    """Return sum_j |q_j - x_j|^p for each query row and each of its candidate rows, column by column."""
    out = np.zeros(candidates.shape, dtype=np.float64)
    for j in range(matrix.shape[1]):
        diff = np.abs(queries[:, j, None] - matrix[candidates, j])
        out += diff * diff if p == 2 else (diff if p == 1 else diff**p)
    return out


def to_distance(reduced: np.ndarray, p: float) -> np.ndarray:
    """Return Minkowski distances from the sums ``reduced_distances`` returns."""
    return np.sqrt(reduced) if p == 2 else (reduced if p == 1 else reduced ** (1.0 / p))


def _reduced(distance: np.ndarray, p: float) -> np.ndarray:
    return distance * distance if p == 2 else (distance if p == 1 else distance**p)


def _error_bound(queries: np.ndarray, largest: float, p: float) -> np.ndarray:
    """Return, per query, a bound on how far the search's distance sums may be from ours (brute
    force computes |q|^2 + |x|^2 - 2 q.x, which loses precision on rows far from the origin)."""
    return 1e-10 * (1.0 + (np.abs(queries) ** p).sum(axis=1) + largest)


def tie_key(reduced: np.ndarray) -> np.ndarray:
    """Return the distance sums rounded so that sums agreeing to TIE_DECIMALS decimals are equal."""
    return np.round(reduced, TIE_DECIMALS)


def nearest(search: Any, matrix: np.ndarray, queries: np.ndarray, k: int, p: float) -> tuple[np.ndarray, np.ndarray]:
    """Return the positions (n x k) of each query's k nearest fitting rows and their distances.

    ``search`` is a fitted sklearn.neighbors.NearestNeighbors over ``matrix``. The result for a
    query row does not depend on the other rows queried with it.
    """
    n_fit = matrix.shape[0]
    largest = float((np.abs(matrix) ** p).sum(axis=1).max(initial=0.0))
    positions = np.empty((len(queries), k), dtype=np.int64)
    reduced = np.empty((len(queries), k), dtype=np.float64)
    pending = np.arange(len(queries))
    wanted = min(n_fit, k + MARGIN)
    while len(pending):
        covered = _nearest_among(search, matrix, queries, pending, k, wanted, p, largest, positions, reduced)
        if wanted == n_fit:
            break
        pending = pending[~covered]
        wanted = min(n_fit, 4 * wanted)
    return positions, to_distance(reduced, p)


def _nearest_among(search, matrix, queries, rows, k, wanted, p, largest, positions, reduced) -> np.ndarray:
    """Fill ``positions`` and ``reduced`` for query ``rows`` from ``wanted`` candidates each; return
    which rows are settled (no fitting row left out could tie with their k-th neighbour)."""
    covered = np.ones(len(rows), dtype=bool)
    block = max(1, BLOCK_CELLS // wanted)
    for start in range(0, len(rows), block):
        picked = rows[start:start + block]
        found, candidates = search.kneighbors(queries[picked], n_neighbors=wanted)
        exact = reduced_distances(queries[picked], matrix, candidates, p)
        order = np.lexsort((candidates, tie_key(exact)), axis=1)
        candidates = np.take_along_axis(candidates, order, axis=1)
        exact = np.take_along_axis(exact, order, axis=1)
        positions[picked], reduced[picked] = candidates[:, :k], exact[:, :k]
        if wanted < matrix.shape[0]:
            # a row the search left out is at least as far as its farthest candidate, to rounding
            nearest_left_out = _reduced(found[:, -1], p) - _error_bound(queries[picked], largest, p)
            covered[start:start + block] = tie_key(nearest_left_out) > tie_key(exact[:, k - 1])
    return covered


def average_of(target: np.ndarray, positions: np.ndarray, distances: np.ndarray, weights: str) -> np.ndarray:
    """Return each row's mean of ``target`` over its neighbours, or the inverse-distance weighted mean.

    With ``weights="distance"`` a row with neighbours at distance 0 averages those alone, as
    scikit-learn's KNeighborsRegressor does. Sums run over the neighbours in their (distance,
    position) order, so every row's value is the same whatever rows are predicted with it. A
    target of K columns gives each row's K means.
    """
    shape = (len(positions), *target.shape[1:])
    if weights == "uniform":
        total = np.zeros(shape)
        for j in range(positions.shape[1]):
            total += target[positions[:, j]]
        return total / positions.shape[1]
    with np.errstate(divide="ignore"):
        inverse = 1.0 / distances
    exact = np.isinf(inverse)
    on_a_row = exact.any(axis=1)
    inverse[on_a_row] = exact[on_a_row]
    total, weight = np.zeros(shape), np.zeros(len(positions))
    several = target.ndim == 2
    for j in range(positions.shape[1]):
        total += (inverse[:, j, None] if several else inverse[:, j]) * target[positions[:, j]]
        weight += inverse[:, j]
    return total / (weight[:, None] if several else weight)
