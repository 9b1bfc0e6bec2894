"""The chain table's rows: a live chain and its chain file opened read-only show the same rows."""

from __future__ import annotations

import math

import pytest
from sklearn.datasets import load_diabetes

import stages
from tui.view import ImportanceCache, view_of_chain, view_of_fitted

SCHEMES = [
    stages.Holdout(fraction=0.25, seed=0),
    stages.KFold(folds=3, seed=0),
    stages.AllRows(),
]


def cells(row) -> tuple:
    """Return a row's cells with NaN written as the text "nan", so rows compare equal cell for cell."""
    values = (row.index, row.kind, row.shrinkage, row.train, row.valid, row.change, row.second, row.test,
              row.spread, row.seconds, row.overfit, row.best)
    return tuple("nan" if isinstance(v, float) and math.isnan(v) else v for v in values)


@pytest.mark.parametrize("validation", SCHEMES, ids=["holdout", "kfold", "none"])
def test_a_chain_file_opened_read_only_shows_the_live_chains_rows(validation):
    # scikit-learn's diabetes data (Efron et al. 2004)
    chain = stages.Chain(load_diabetes(as_frame=True).frame, "target", validation, seed=1)
    chain.add("linear")
    chain.add("tree", shrinkage=0.5, params={"max_depth": 2})
    live = view_of_chain(chain, ImportanceCache())
    stored = view_of_fitted(chain.fitted(), "chain file")
    assert [cells(r) for r in stored.rows] == [cells(r) for r in live.rows]
