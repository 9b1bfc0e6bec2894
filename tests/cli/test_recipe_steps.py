"""Recipe steps beyond plain stages: growing with patience, and [[audition]] tables."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from cli_support import REGRESSION_RECIPE

import stages
from stages.decide.audition import expand_grid
from stages.decide.grow import grow_spec
from stages.errors import RecipeError
from stages.files.recipe import chain_to_recipe, fit_recipe, parse_recipe, recipe_to_toml

GROW = REGRESSION_RECIPE + '''
[[stage]]
kind = "tree"
shrinkage = 0.3
repeat = 40
patience = 3
params = { max_depth = 3 }
'''

AUDITION = REGRESSION_RECIPE + '''
[[audition]]
after = 1
choose = "best"
[[audition.candidate]]
kind = "tree"
shrinkage = 0.5
params = { max_depth = [2, 4] }
[[audition.candidate]]
kind = "knn"
shrinkage = 0.5
'''



def test_repeat_with_patience_grows_and_trims_like_grow(work):
    recipe = parse_recipe(GROW, work)
    last = len(recipe.stages) - 1
    assert recipe.patience == {last: 3}
    chain = fit_recipe(recipe)
    # the same stages built by hand: the plain entries, then grow with the same patience
    hand = fit_recipe(parse_recipe(REGRESSION_RECIPE, work))
    result = grow_spec(hand, recipe.stages[last][0], max_stages=40, patience=3)
    assert result.stopped in ("patience", "max_stages")
    assert np.array_equal(chain.outputs()[0], hand.outputs()[0])
    assert chain.best_row() == len(chain)


def test_an_audition_keeps_the_best_candidate_at_its_place_in_the_chain(work):
    recipe = parse_recipe(AUDITION, work)
    assert len(recipe.auditions) == 1 and len(recipe.auditions[0].candidates) == 3
    chain = fit_recipe(recipe)
    # by hand: the first stage entry, the audition, then the remaining entries
    plain = parse_recipe(REGRESSION_RECIPE, work)
    hand = stages.Chain(pd.read_csv(work / "diabetes.csv"), plain.target, plain.validation, plain.loss, seed=plain.seed,
                        ignore=plain.ignore)
    hand.add_specs([plain.stages[0][0]] * plain.stages[0][1])
    candidates = hand.audition(expand_grid({"kind": "tree", "shrinkage": 0.5, "params": {"max_depth": [2, 4]}})
                               + [stages.StageSpec("knn", 0.5)])
    best = min(candidates, key=lambda c: c.valid)
    hand.keep(best)
    hand.add_specs([spec for spec, repeat in plain.stages[1:] for _ in range(repeat)])
    assert [s.spec for s in chain.stages] == [s.spec for s in hand.stages]
    assert np.array_equal(chain.outputs()[0], hand.outputs()[0])


def test_patience_and_auditions_survive_writing_the_recipe_back(work):
    for text in (GROW, AUDITION):
        recipe = parse_recipe(text, work)
        again = parse_recipe(recipe_to_toml(recipe, work), work)
        assert again.patience == recipe.patience
        assert again.auditions == recipe.auditions
        assert again.stages == recipe.stages


def test_audition_mistakes_name_the_recipe_line(work):
    bad_rule = AUDITION.replace('choose = "best"', 'choose = "luck"')
    with pytest.raises(RecipeError, match=r"line \d+: choose must be one of best, one_standard_error"):
        parse_recipe(bad_rule, work)
    bad_after = AUDITION.replace("after = 1", "after = 9")
    with pytest.raises(RecipeError, match=r"line \d+: after must be a whole number from 0 to"):
        parse_recipe(bad_after, work)
    bad_param = AUDITION.replace("max_depth = [2, 4]", "depth = [2, 4]")
    with pytest.raises(RecipeError, match="kind 'tree' has no parameter 'depth'"):
        parse_recipe(bad_param, work)
    no_candidate = REGRESSION_RECIPE + "\n[[audition]]\nchoose = \"best\"\n"
    with pytest.raises(RecipeError, match=r"needs at least one \[\[audition.candidate\]\]"):
        parse_recipe(no_candidate, work)


def test_a_live_chain_after_an_audition_writes_a_recipe_that_replays_it(work):
    chain = fit_recipe(parse_recipe(AUDITION, work))
    text = chain_to_recipe(chain, work)
    again = fit_recipe(parse_recipe(text, work))
    assert np.array_equal(again.outputs()[0], chain.outputs()[0])
