"""The one reader of stage and validation input: specs, or errors that name the key at fault."""

from __future__ import annotations

import pytest

from stages.errors import StageSpecError, ValidationSpecError
from stages.parsing import (
    ENTRY_KEYS,
    StageEntry,
    as_candidate,
    expand_grid,
    stage_entry,
    stage_spec,
    validation_spec,
)
from stages.spec import StageSpec
from stages.validation import Holdout, KFold, TimeOrder


def test_an_entry_becomes_a_spec_a_repeat_and_a_patience():
    entry = stage_entry({"kind": "tree", "shrinkage": 0.3, "features": ["a"], "params": {"max_depth": 2},
                         "repeat": 4, "patience": 2}, "regression")
    assert entry == StageEntry(StageSpec("tree", 0.3, ("a",), {"max_depth": 2}), 4, 2)


@pytest.mark.parametrize(("entry", "key", "words"), [
    ({"kind": "tree", "shrinkge": 0.5}, "shrinkge", "unknown key 'shrinkge' in [[stage]] (keys: kind,"),
    ({"shrinkage": 0.5}, "kind", "[[stage]] has no 'kind'"),
    ({"kind": 3}, "kind", "kind must be text in quotes, not 3"),
    ({"kind": "treee"}, "kind", "unknown stage kind 'treee'"),
    ({"kind": "tree", "shrinkage": "half"}, "shrinkage", 'shrinkage must be a number, not "half"'),
    ({"kind": "tree", "shrinkage": 2}, "shrinkage", "shrinkage must be in (0, 1], not 2"),
    ({"kind": "tree", "features": "a"}, "features", 'features must be a list of column names in quotes, not "a"'),
    ({"kind": "tree", "params": 3}, "params", "params must be a table such as { max_depth = 3 }, not 3"),
    ({"kind": "tree", "params": {"depth": 2}}, "params", "kind 'tree' has no parameter 'depth'"),
    ({"kind": "tree", "repeat": 0}, "repeat", "repeat must be at least 1, not 0"),
    ({"kind": "tree", "patience": True}, "patience", "patience must be a whole number, not true"),
])
def test_a_mistake_names_the_key_it_is_in(entry, key, words):
    with pytest.raises(StageSpecError) as caught:
        stage_entry(entry, "regression", keys=ENTRY_KEYS)
    assert caught.value.key == key and words in str(caught.value)


def test_without_a_task_the_kind_and_its_params_are_left_to_the_chain():
    assert stage_spec({"kind": "no_such_kind", "params": {"x": 1}}) == StageSpec("no_such_kind", params={"x": 1})


def test_toml_none_is_python_none_at_any_depth_only_where_toml_is_read():
    written = {"kind": "tree", "params": {"max_depth": "none", "grid": ["none", 1]}}
    assert stage_spec(written, toml=True).params == {"max_depth": None, "grid": [None, 1]}
    assert stage_spec(written).params["max_depth"] == "none"


def test_an_expanded_candidate_reads_back_as_that_one_candidate():
    (spec,) = expand_grid({"kind": "lightgbm", "params": {"monotone_constraints": [[1, 0]]}})
    assert spec.params == {"monotone_constraints": [1, 0]}
    assert expand_grid(as_candidate(spec)) == [spec]
    grid = expand_grid({"kind": "tree", "shrinkage": [0.1, 0.5], "params": {"max_depth": [2, 3]}})
    assert [expand_grid(as_candidate(s)) for s in grid] == [[s] for s in grid]


def test_an_empty_grid_names_its_key():
    with pytest.raises(StageSpecError, match="max_features is an empty list") as caught:
        expand_grid({"kind": "forest", "params": {"max_features": []}})
    assert caught.value.key == "params"


def test_a_validation_table_takes_the_chains_seed_when_its_scheme_draws_rows_and_names_none():
    assert validation_spec({"scheme": "kfold", "folds": 3}, seed=7) == KFold(folds=3, seed=7)
    assert validation_spec({"fraction": 0.3, "seed": 1}, seed=7) == Holdout(fraction=0.3, seed=1)
    assert validation_spec({"scheme": "time", "column": "day"}, seed=7) == TimeOrder(column="day")


@pytest.mark.parametrize(("table", "key"), [
    ({"scheme": "bootstrap"}, "scheme"),
    ({"scheme": "holdout", "folds": 3}, "folds"),
    ({"fraction": 1.5}, "fraction"),
    ({"fraction": 0.5, "test_fraction": 0.5}, "test_fraction"),
    ({"scheme": "kfold", "folds": 1}, "folds"),
    ({"scheme": "time"}, "column"),
])
def test_a_validation_mistake_names_its_key(table, key):
    with pytest.raises(ValidationSpecError) as caught:
        validation_spec(table)
    assert caught.value.key == key
