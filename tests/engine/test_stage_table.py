"""One stage table: a live chain, its chain file and its scikit-learn wrapper give the same table.

The table is built once, from each stage's spec and scores; a loaded chain file has the same
specs and scores stored, so its table must equal the live chain's, cell for cell.
"""

from __future__ import annotations

import pandas as pd
import pytest

import stages
from stages.bridges.estimator import wrap_fitted
from stages.report.table import fitted_rows

SCHEMES = [
    stages.Holdout(fraction=0.25, seed=0, test_fraction=0.15),
    stages.KFold(folds=3, seed=0),
    stages.AllRows(),
]


def grown(frame: pd.DataFrame, validation, reveal: bool = False) -> stages.Chain:
    """Return a chain over scikit-learn's diabetes data with a linear and two tree stages."""
    chain = stages.Chain(frame, "target", validation, seed=2)
    chain.add("linear")
    chain.add("tree", shrinkage=0.3, params={"max_depth": 2}, repeat=2)
    if reveal:
        chain.reveal_test()
    return chain


@pytest.mark.parametrize("validation", SCHEMES, ids=lambda v: v.scheme)
def test_a_chain_files_table_is_the_live_chains_table(diabetes_frame, validation):
    chain = grown(diabetes_frame, validation)
    pd.testing.assert_frame_equal(fitted_rows(chain.fitted()).frame(), chain.table())


def test_a_revealed_test_part_is_in_the_chain_files_table_too(diabetes_frame):
    chain = grown(diabetes_frame, SCHEMES[0], reveal=True)
    assert "test_rmse" in chain.table().columns
    pd.testing.assert_frame_equal(fitted_rows(chain.fitted()).frame(), chain.table())


@pytest.mark.parametrize("validation", SCHEMES, ids=lambda v: v.scheme)
def test_a_wrapped_chains_table_is_the_live_chains_table(diabetes_frame, validation):
    chain = grown(diabetes_frame, validation)
    pd.testing.assert_frame_equal(wrap_fitted(chain.fitted()).table_, chain.table())
