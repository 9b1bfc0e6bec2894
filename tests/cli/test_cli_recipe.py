"""Recipes: reading every part of the TOML, line-numbered errors, writing, and replaying a chain."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_support import REGRESSION_RECIPE, diabetes_frame, write_recipe
from hypothesis import given, settings
from hypothesis import strategies as st

import stages
from stages.errors import RecipeError
from stages.files.recipe import (
    Recipe,
    chain_to_recipe,
    fit_recipe,
    parse_recipe,
    read_recipe,
    recipe_to_toml,
)
from stages.files.toml_text import toml_value
from stages.spec import StageSpec
from stages.validation import AllRows, GroupHoldout, Holdout, KFold, SplitColumn, TimeOrder

# ----------------------------------------------------------------------------- reading


def test_reading_a_recipe_gives_every_setting_and_resolves_the_path_beside_it(work):
    recipe = read_recipe("diabetes.toml")
    assert recipe.data_path == work / "diabetes.csv"
    assert recipe.target == "progression" and recipe.ignore == ("patient",)
    assert recipe.loss == "squared" and recipe.seed == 3 and recipe.threshold == 0.5
    # the holdout's seed follows the [chain] seed when the recipe does not give one
    assert recipe.validation == Holdout(fraction=0.25, seed=3)
    assert recipe.stages == ((StageSpec("linear"), 1), (StageSpec("tree", 0.5, (), {"max_depth": 2}), 2))
    assert [s.kind for s in recipe.specs()] == ["linear", "tree", "tree"]


def test_a_recipe_path_in_another_folder_is_relative_to_the_recipe_not_the_current_folder(work, monkeypatch):
    sub = work / "recipes"
    sub.mkdir()
    write_recipe(sub, REGRESSION_RECIPE.replace('"diabetes.csv"', '"../diabetes.csv"'))
    monkeypatch.chdir(sub.parent.parent)
    assert read_recipe(sub / "recipe.toml").data_path.resolve() == work / "diabetes.csv"


SCHEMES = [
    ('scheme = "holdout"\nfraction = 0.3\nseed = 5\ntest_fraction = 0.1', Holdout(0.3, 5, 0.1)),
    ('scheme = "kfold"\nfolds = 4\nstratify = false', KFold(folds=4, seed=3, stratify=False)),
    ('scheme = "time"\ncolumn = "visit"\nfraction = 0.25', TimeOrder(column="visit", fraction=0.25)),
    ('scheme = "group"\ncolumn = "clinic"\nfraction = 0.3', GroupHoldout(column="clinic", fraction=0.3, seed=3)),
    ('scheme = "column"\ncolumn = "split"', SplitColumn(column="split")),
    ('scheme = "none"', AllRows()),
]


@pytest.mark.parametrize(("table", "expected"), SCHEMES, ids=[s[1].scheme for s in SCHEMES])
def test_every_validation_scheme_is_read_fit_and_written_back(work, table, expected):
    frame = diabetes_frame()
    frame["visit"] = np.arange(len(frame))
    frame["clinic"] = [f"C{i % 9}" for i in range(len(frame))]
    frame["split"] = np.where(np.arange(len(frame)) % 5 == 0, "valid", "train")
    frame.to_csv(work / "schemes.csv", index=False)
    text = REGRESSION_RECIPE.replace('"diabetes.csv"', '"schemes.csv"').replace(
        'scheme = "holdout"\nfraction = 0.25', table).replace("repeat = 2", "repeat = 1")
    recipe = parse_recipe(text, work)
    assert recipe.validation == expected
    chain = fit_recipe(recipe)
    assert len(chain) == 2 and chain.validation == expected
    assert parse_recipe(chain_to_recipe(chain), work).validation == expected


def test_none_in_params_is_written_as_the_text_none_and_read_back_as_none(work):
    recipe = parse_recipe(REGRESSION_RECIPE.replace("max_depth = 2", 'max_depth = "none"'), work)
    assert recipe.stages[1][0].params == {"max_depth": None}
    assert 'max_depth = "none"' in recipe_to_toml(recipe)


# ----------------------------------------------------------------------------- errors


def line_of(text: str, fragment: str) -> int:
    """Return the 1-based line of the first line of ``text`` holding ``fragment``."""
    return next(i for i, line in enumerate(text.splitlines(), 1) if fragment in line)


BAD = [
    ("shrinkage = 0.5", "shrinkge = 0.5",
     "unknown key 'shrinkge' in [[stage]] (keys: kind, shrinkage, features, params, repeat, patience)"),
    ('kind = "tree"', 'kind = "treee"', "unknown stage kind 'treee'"),
    ("max_depth = 2", "max_dept = 2", "kind 'tree' has no parameter 'max_dept'"),
    ("seed = 3", "sed = 3", "unknown key 'sed' in [chain] (keys: loss, seed, threshold, power, threads)"),
    ("fraction = 0.25", "folds = 3", "validation scheme 'holdout' has no key 'folds'; accepted keys: scheme,"),
    ("fraction = 0.25", "fraction = 1.5", "validation fraction must be in (0, 1), got 1.5"),
    ('scheme = "holdout"', 'scheme = "bootstrap"', "unknown validation scheme 'bootstrap'; accepted schemes:"),
    ("repeat = 2", "repeat = 0", "repeat must be at least 1, not 0"),
    ("repeat = 2", 'repeat = "two"', 'repeat must be a whole number, not "two"'),
    ("shrinkage = 0.5", "shrinkage = 2", "shrinkage must be in (0, 1]"),
    ('ignore = ["patient"]', 'ignore = "patient"', 'ignore must be a list of column names in quotes, not "patient"'),
    ("[chain]", "[chian]", "unknown table [chian] (tables: [data], [chain], [validation], [[stage]], [[audition]], [cluster])"),
    ('loss = "squared"', "loss = squared", "not valid TOML"),
    ("[data]", 'colour = "red"\n[data]', "unknown key 'colour' outside any table"),
    ("[validation]", '[[audition]]\nwhen = 1\n[validation]', "unknown key 'when' in [[audition]]"),
    ("[validation]", '[[broth]]\nkind = "tree"\n[validation]', "unknown table [[broth]]"),
]


@pytest.mark.parametrize(("old", "new", "message"), BAD, ids=[b[1] for b in BAD])
def test_a_recipe_mistake_names_the_file_and_its_line(work, old, new, message):
    text = REGRESSION_RECIPE.replace(old, new, 1)
    path = work / "bad.toml"
    path.write_text(text)
    with pytest.raises(RecipeError) as caught:
        read_recipe(path)
    first = new.splitlines()[1] if new.startswith("[[audition]]") else new.splitlines()[0]
    assert str(caught.value) == f"bad.toml line {line_of(text, first)}: " + str(caught.value).split(": ", 1)[1]
    assert message in str(caught.value)


def test_a_recipe_without_target_or_stages_says_what_is_missing(work):
    no_target = REGRESSION_RECIPE.replace('target = "progression"\n', "")
    with pytest.raises(RecipeError, match=rf"recipe line {line_of(no_target, '[data]')}: \[data\] has no 'target'"):
        parse_recipe(no_target, work)
    no_stage = REGRESSION_RECIPE.split("[[stage]]")[0]
    with pytest.raises(RecipeError, match=r"recipe: the recipe has no \[\[stage\]\]"):
        parse_recipe(no_stage, work)


def test_a_column_the_data_lacks_is_named_with_the_recipe_line(work):
    text = REGRESSION_RECIPE.replace('ignore = ["patient"]', 'ignore = ["patient"]\nfeatures = ["age", "bmii"]')
    with pytest.raises(RecipeError) as caught:
        fit_recipe(parse_recipe(text, work))
    assert str(caught.value) == (f"recipe line {line_of(text, 'bmii')}: features 'bmii' is not a column of "
                                 "diabetes.csv (did you mean 'bmi'?)")
    stage_text = REGRESSION_RECIPE.replace('kind = "linear"', 'kind = "linear"\nfeatures = ["nope"]')
    with pytest.raises(RecipeError) as caught:
        fit_recipe(parse_recipe(stage_text, work))
    assert str(caught.value).startswith(f"recipe line {line_of(stage_text, 'nope')}: [[stage]] 'linear': "
                                        "feature 'nope' is not among the chain's features")


def test_unreadable_recipe_files_are_recipe_errors(work):
    with pytest.raises(RecipeError, match="missing.toml: no such file"):
        read_recipe(work / "missing.toml")
    (work / "latin.toml").write_bytes(b'[data]\ntarget = "caf\xe9"\n')
    with pytest.raises(RecipeError, match="latin.toml: the text is not UTF-8"):
        read_recipe(work / "latin.toml")


# ----------------------------------------------------------------------------- writing TOML

plain = st.one_of(
    st.text(), st.booleans(), st.integers(-(2**63), 2**63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
)
values = st.recursive(plain, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                     st.dictionaries(st.text(), inner, max_size=4)), max_leaves=12)


def same(a, b) -> bool:
    """Return True when two TOML values are equal, NaN matching NaN and types kept."""
    if isinstance(a, float) and isinstance(b, float):
        return (math.isnan(a) and math.isnan(b)) or (a == b and math.copysign(1, a) == math.copysign(1, b))
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
    return type(a) is type(b) and a == b


@settings(max_examples=300, deadline=None)
@given(values)
def test_tomllib_reads_back_exactly_what_the_writer_wrote(value):
    # the reference reader is Python's own tomllib (TOML 1.0)
    assert same(tomllib.loads(f"v = {toml_value(value)}")["v"], value)


def test_the_writer_escapes_control_characters_quotes_and_backslashes():
    text = 'a"b\\c\nd\te\x00f\x7fg\u00e9'
    assert toml_value(text) == '"a\\"b\\\\c\\nd\\te\\u0000f\\u007Fg\u00e9"'
    assert tomllib.loads(f"v = {toml_value(text)}")["v"] == text
    assert [toml_value(v) for v in (float("inf"), float("-inf"), 1e-05, 2.0, True)] == ["inf", "-inf", "1e-05", "2.0", "true"]


def test_a_value_toml_cannot_hold_is_refused():
    with pytest.raises(RecipeError, match="cannot write"):
        toml_value(object())


def test_a_written_recipe_reads_back_as_the_same_recipe(work):
    recipe = read_recipe("diabetes.toml")
    again = parse_recipe(recipe_to_toml(recipe), work, source=recipe.source)
    assert again == recipe


# ----------------------------------------------------------------------------- replaying a chain


def test_a_chain_built_by_hand_replays_from_its_recipe_to_the_same_predictions(work):
    chain = stages.Chain.from_file("diabetes.csv", "progression", stages.KFold(folds=3, seed=4), "huber",
                                   seed=11, ignore=["patient"])
    chain.add("linear")
    chain.add("tree", shrinkage=0.2, params={"max_depth": 2, "min_samples_leaf": 5}, repeat=3)
    chain.add("lightgbm", shrinkage=0.5, params={"n_estimators": 5, "num_leaves": 4})
    text = chain.to_recipe()
    assert text.count("[[stage]]") == 3 and "repeat = 3" in text and 'path = "diabetes.csv"' in text
    (work / "hand.toml").write_text(text)
    replayed = fit_recipe("hand.toml")
    assert [s.spec for s in replayed.stages] == [s.spec for s in chain.stages]
    chain.save(work / "hand.chain")
    replayed.save(work / "replayed.chain")
    frame = pd.read_csv(work / "diabetes.csv")
    first = stages.load(work / "hand.chain").predict(frame)
    second = stages.load(work / "replayed.chain").predict(frame)
    assert np.array_equal(first, second)  # same data, same seed: identical, bit for bit


def test_a_binary_chain_keeps_its_positive_class_threshold_and_listed_features(work):
    frame = pd.read_csv(work / "cancer.csv")
    frame["diagnosis"] = np.where(frame.pop("malignant") == 1, "malignant", "benign")
    chain = stages.Chain(frame, "diagnosis", stages.Holdout(seed=2), features=["mean_radius", "mean_texture"],
                         positive="benign", threshold=0.3, source="cancer_text.csv")
    chain.add("logistic")
    recipe = parse_recipe(chain_to_recipe(chain), work)
    assert recipe.positive == "benign" and recipe.threshold == 0.3 and recipe.task == "binary"
    assert recipe.features == ("mean_radius", "mean_texture")
    assert recipe.data_path == work / "cancer_text.csv"


def test_data_given_to_fit_recipe_replaces_the_recipe_path(work):
    half = pd.read_csv(work / "diabetes.csv").iloc[:200]
    chain = fit_recipe("diabetes.toml", data=half)
    assert chain.layout.n_train + chain.layout.n_valid == 200
    recipe: Recipe = read_recipe("diabetes.toml")
    assert isinstance(recipe.data_path, Path)
