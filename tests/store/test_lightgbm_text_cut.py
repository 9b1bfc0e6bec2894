"""A LightGBM model text cut anywhere in its trees, even inside a line, is refused as cut short.

Reference: LightGBM's own model text (lightgbm.Booster.model_to_string) of a booster trained on
scikit-learn's diabetes data.
"""

from __future__ import annotations

import lightgbm
import pytest
from sklearn.datasets import load_diabetes

from stages.errors import ChainFileError
from stages.lightgbm_text import check_model_text


def test_a_text_cut_inside_any_line_of_its_trees_is_cut_short():
    X, y = load_diabetes(return_X_y=True)
    booster = lightgbm.train({"verbosity": -1, "num_leaves": 4}, lightgbm.Dataset(X, label=y), num_boost_round=3)
    text = booster.model_to_string()
    check_model_text(text, X.shape[1])
    start, end = text.index("Tree=0"), text.index("end of trees")
    for cut in range(start + 1, end, max(1, (end - start) // 40)):
        with pytest.raises(ChainFileError, match="cut"):
            check_model_text(text[:cut], X.shape[1])
