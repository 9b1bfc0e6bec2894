"""One reader of stage and validation input: a recipe, its [[audition]] tables, the estimators and
``spec_from_dict`` refuse the same mistake in the same words, and read the same entry the same way."""

from __future__ import annotations

import numpy as np
import pytest
from cli_support import REGRESSION_RECIPE, diabetes_frame

from stages.bridges.estimator import ChainRegressor
from stages.errors import RecipeError, ValidationSpecError
from stages.files.recipe import fit_recipe, parse_recipe, recipe_to_toml
from stages.validation import spec_from_dict


def recipe_message(text: str) -> str:
    """Return what reading the recipe ``text`` says, without the name and line in front."""
    with pytest.raises(RecipeError) as caught:
        parse_recipe(text)
    return str(caught.value).split(": ", 1)[1]


def test_a_bad_repeat_is_refused_in_the_same_words_by_a_recipe_and_the_estimator():
    said = recipe_message(REGRESSION_RECIPE.replace("repeat = 2", "repeat = 0"))
    frame = diabetes_frame()
    X, y = frame[["age", "bmi"]].to_numpy(), frame["progression"].to_numpy()
    with pytest.raises(ValueError) as caught:
        ChainRegressor(stages=[{"kind": "tree", "repeat": 0}]).fit(X, y)
    assert str(caught.value) == said


@pytest.mark.parametrize(("old", "new", "table"), [
    ('scheme = "holdout"', 'scheme = "bootstrap"', {"scheme": "bootstrap"}),
    ("fraction = 0.25", "folds = 3", {"scheme": "holdout", "folds": 3}),
])
def test_a_bad_validation_table_is_refused_in_the_same_words_by_a_recipe_and_spec_from_dict(old, new, table):
    said = recipe_message(REGRESSION_RECIPE.replace(old, new, 1))
    with pytest.raises(ValidationSpecError) as caught:
        spec_from_dict(table)
    assert said == str(caught.value)


AUDITION = REGRESSION_RECIPE.replace('ignore = ["patient"]', 'features = ["bmi", "bp"]') + '''
[[audition]]
[[audition.candidate]]
kind = "lightgbm"
params = { n_estimators = 5, min_child_samples = 5, monotone_constraints = [[1, 1]], max_depth = "none" }
'''


def test_an_audition_candidate_reads_none_as_a_stage_does():
    stage = parse_recipe(REGRESSION_RECIPE.replace("max_depth = 2", 'max_depth = "none"'))
    assert stage.stages[1][0].params["max_depth"] is None
    (candidate,) = parse_recipe(AUDITION).auditions[0].candidates
    assert candidate.params["max_depth"] is None


def test_an_audition_of_a_parameter_whose_value_is_a_list_is_one_candidate_fit_and_written_back(work):
    recipe = parse_recipe(AUDITION, work)
    (candidate,) = recipe.auditions[0].candidates
    assert candidate.params["monotone_constraints"] == [1, 1]
    assert parse_recipe(recipe_to_toml(recipe, work), work).auditions == recipe.auditions
    chain = fit_recipe(recipe)
    kept = chain.stages[-1]
    assert kept.kind == "lightgbm" and kept.spec.params["monotone_constraints"] == [1, 1]
    assert np.isfinite(chain.table()["valid_rmse"]).all()
