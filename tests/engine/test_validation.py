"""Validation schemes: which rows fit, which score, which are locked away as the test part."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer
from sklearn.model_selection import KFold as SklearnKFold
from sklearn.model_selection import StratifiedKFold

from stages.errors import ValidationSpecError
from stages.validation import (
    GroupHoldout,
    Holdout,
    KFold,
    Split,
    SplitColumn,
    TimeOrder,
    spec_from_dict,
)

FAST = settings(max_examples=50, deadline=None)


def rows(n: int, **columns: object) -> pd.DataFrame:
    """Return a frame of ``n`` rows with a feature column and the given extra columns."""
    return pd.DataFrame({"x": np.arange(n, dtype=float), **columns})


def regression_y(n: int) -> np.ndarray:
    return np.linspace(0.0, 1.0, n)


@pytest.fixture(scope="module")
def breast_cancer() -> tuple[pd.DataFrame, np.ndarray]:
    # scikit-learn's breast cancer data (sklearn.datasets.load_breast_cancer, the Wisconsin
    # diagnostic data): 569 rows, 212 malignant (target 0) and 357 benign (target 1).
    # Malignant is the positive class here.
    data = load_breast_cancer(as_frame=True)
    y = (data.target.to_numpy() == 0).astype(np.float64)
    assert len(y) == 569 and y.sum() == 212
    return data.data, y


def assert_partition(split: Split, n: int) -> None:
    """Assert the parts are sorted int64, disjoint, and cover rows 0..n-1."""
    parts = [split.train, split.valid, split.test]
    for part in [*parts, *split.folds]:
        assert part.dtype == np.int64
        assert np.all(np.diff(part) > 0)
    joined = np.concatenate(parts)
    assert len(joined) == n
    assert np.array_equal(np.sort(joined), np.arange(n))


def assert_same(a: Split, b: Split) -> None:
    for name in ("train", "valid", "test"):
        assert np.array_equal(getattr(a, name), getattr(b, name))
    assert len(a.folds) == len(b.folds)
    for fa, fb in zip(a.folds, b.folds, strict=True):
        assert np.array_equal(fa, fb)


# ----------------------------------------------------------------------------- holdout


def test_holdout_on_1000_rows_gives_700_fit_200_validation_100_test() -> None:
    split = Holdout(fraction=0.2, test_fraction=0.1).split(
        rows(1000), regression_y(1000), "regression"
    )
    assert (len(split.train), len(split.valid), len(split.test)) == (700, 200, 100)
    assert_partition(split, 1000)


def test_holdout_rows_are_pinned_for_seed_0_on_every_machine() -> None:
    # RandomState(0).permutation(10) is [2 8 4 9 1 6 7 3 0 5]; numpy keeps that stream fixed.
    split = Holdout(fraction=0.2, seed=0).split(rows(10), regression_y(10), "regression")
    assert split.valid.tolist() == [2, 8]
    assert split.train.tolist() == [0, 1, 3, 4, 5, 6, 7, 9]
    assert split.test.tolist() == []


@FAST
@given(
    n=st.integers(1, 400),
    fraction=st.floats(0.01, 0.6),
    test_fraction=st.one_of(st.just(0.0), st.floats(0.01, 0.35)),
    seed=st.integers(0, 2**31 - 1),
    binary=st.booleans(),
)
def test_holdout_parts_are_disjoint_cover_all_rows_and_round_to_nearest(
    n: int, fraction: float, test_fraction: float, seed: int, binary: bool
) -> None:
    y = (np.random.RandomState(seed).rand(n) < 0.3).astype(float) if binary else regression_y(n)
    spec = Holdout(fraction=fraction, seed=seed, test_fraction=test_fraction)
    try:
        split = spec.split(rows(n), y, "binary" if binary else "regression")
    except ValidationSpecError as err:
        assert "leave no rows to fit on" in str(err)
        assert n * (1 - fraction - test_fraction) <= 2
        return
    assert_partition(split, n)
    assert len(split.valid) == 1 or abs(len(split.valid) - fraction * n) <= 0.5 + 1e-9
    if test_fraction:
        assert len(split.test) == 1 or abs(len(split.test) - test_fraction * n) <= 0.5 + 1e-9
    else:
        assert len(split.test) == 0


def test_holdout_gives_identical_arrays_every_run() -> None:
    y = (np.arange(500) % 3 == 0).astype(float)
    spec = Holdout(fraction=0.25, seed=7, test_fraction=0.1)
    assert_same(spec.split(rows(500), y, "binary"), spec.split(rows(500), y, "binary"))


def test_holdout_with_different_seeds_picks_different_rows() -> None:
    a = Holdout(seed=1).split(rows(500), regression_y(500), "regression")
    b = Holdout(seed=2).split(rows(500), regression_y(500), "regression")
    assert not np.array_equal(a.valid, b.valid)


def test_holdout_ignores_the_frame_index() -> None:
    frame = rows(50).set_index(pd.Index(np.arange(50) * 7 + 3))
    a = Holdout(seed=3).split(frame, regression_y(50), "regression")
    b = Holdout(seed=3).split(rows(50), regression_y(50), "regression")
    assert_same(a, b)


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4])
def test_stratified_holdout_keeps_the_breast_cancer_class_rate(breast_cancer, seed: int) -> None:
    frame, y = breast_cancer
    split = Holdout(fraction=0.2, seed=seed, test_fraction=0.1).split(frame, y, "binary")
    assert (len(split.train), len(split.valid), len(split.test)) == (398, 114, 57)
    rates = [y[part].mean() for part in (split.train, split.valid, split.test)]
    assert abs(rates[0] - rates[1]) <= 1 / len(split.valid)
    assert abs(rates[0] - rates[2]) <= 1 / len(split.test)
    assert abs(y[split.valid].sum() - 212 / 569 * 114) <= 1


def test_unstratified_holdout_draws_the_same_rows_as_a_regression_task(breast_cancer) -> None:
    frame, y = breast_cancer
    plain = Holdout(stratify=False, seed=5).split(frame, y, "binary")
    regression = Holdout(seed=5).split(frame, y, "regression")
    assert_same(plain, regression)


# ----------------------------------------------------------------------------- k-fold


@FAST
@given(
    n=st.integers(2, 300),
    folds=st.integers(2, 8),
    test_fraction=st.one_of(st.just(0.0), st.floats(0.01, 0.4)),
    seed=st.integers(0, 2**31 - 1),
)
def test_kfold_folds_partition_the_fit_rows(
    n: int, folds: int, test_fraction: float, seed: int
) -> None:
    spec = KFold(folds=folds, seed=seed, test_fraction=test_fraction)
    try:
        split = spec.split(rows(n), regression_y(n), "regression")
    except ValidationSpecError as err:
        assert f"{folds} folds need at least {folds} rows" in str(err)
        assert n * (1 - test_fraction) < folds + 1
        return
    assert_partition(split, n)
    assert len(split.valid) == 0 and len(split.folds) == folds
    joined = np.concatenate(split.folds)
    assert np.array_equal(np.sort(joined), split.train)
    sizes = [len(f) for f in split.folds]
    assert max(sizes) - min(sizes) <= 1


def test_kfold_with_a_test_part_on_1000_rows_gives_five_folds_of_180() -> None:
    split = KFold(folds=5, test_fraction=0.1).split(rows(1000), regression_y(1000), "regression")
    assert len(split.test) == 100
    assert [len(f) for f in split.folds] == [180] * 5
    assert split.describe() == "5 folds over 900 rows, 100 test"


@pytest.mark.parametrize("seed", [0, 11])
def test_kfold_folds_match_sklearn_kfold_with_the_same_seed(seed: int) -> None:
    # The scheme uses sklearn's KFold(shuffle=True, random_state=seed) and sorts each fold.
    split = KFold(folds=4, seed=seed).split(rows(103), regression_y(103), "regression")
    expected = SklearnKFold(4, shuffle=True, random_state=seed).split(np.zeros((103, 1)))
    for fold, (_, held) in zip(split.folds, expected, strict=True):
        assert np.array_equal(fold, np.sort(held))


@pytest.mark.parametrize("seed", [0, 11])
def test_stratified_kfold_folds_match_sklearn_stratified_kfold(breast_cancer, seed: int) -> None:
    # The scheme uses sklearn's StratifiedKFold(shuffle=True, random_state=seed) for binary.
    frame, y = breast_cancer
    split = KFold(folds=5, seed=seed).split(frame, y, "binary")
    expected = StratifiedKFold(5, shuffle=True, random_state=seed).split(np.zeros((569, 1)), y)
    for fold, (_, held) in zip(split.folds, expected, strict=True):
        assert np.array_equal(fold, np.sort(held))


def test_stratified_kfold_keeps_the_breast_cancer_class_rate_in_every_fold(breast_cancer) -> None:
    frame, y = breast_cancer
    split = KFold(folds=5, seed=3, test_fraction=0.1).split(frame, y, "binary")
    overall = y[split.train].mean()
    for fold in split.folds:
        assert abs(y[fold].mean() - overall) <= 1 / len(fold)


def test_kfold_and_holdout_with_the_same_seed_lock_the_same_test_rows(breast_cancer) -> None:
    frame, y = breast_cancer
    holdout = Holdout(seed=9, test_fraction=0.15).split(frame, y, "binary")
    kfold = KFold(seed=9, test_fraction=0.15).split(frame, y, "binary")
    assert np.array_equal(holdout.test, kfold.test)


def test_kfold_gives_identical_folds_every_run_and_differs_by_seed() -> None:
    y = regression_y(300)
    a, b = (
        KFold(seed=4).split(rows(300), y, "regression"),
        KFold(seed=4).split(rows(300), y, "regression"),
    )
    assert_same(a, b)
    c = KFold(seed=5).split(rows(300), y, "regression")
    assert not np.array_equal(a.folds[0], c.folds[0])


def test_kfold_with_fewer_rows_than_folds_says_how_many_rows_there_are() -> None:
    with pytest.raises(
        ValidationSpecError, match=r"^5 folds need at least 5 rows; the data has 3$"
    ):
        KFold(folds=5).split(rows(3), regression_y(3), "regression")


def test_stratified_kfold_with_a_class_smaller_than_the_folds_is_refused() -> None:
    y = np.array([1.0, 1.0, 1.0] + [0.0] * 20)
    with pytest.raises(ValidationSpecError, match="class 1 has 3"):
        KFold(folds=5).split(rows(23), y, "binary")
    split = KFold(folds=5, stratify=False).split(rows(23), y, "binary")
    assert len(split.folds) == 5


# ----------------------------------------------------------------------------- time order


def test_time_order_puts_the_latest_rows_in_validation_and_test() -> None:
    times = pd.date_range("2024-01-01", periods=100, freq="D")
    shuffled = times[np.random.RandomState(0).permutation(100)]
    frame = rows(100, when=shuffled)
    split = TimeOrder("when", fraction=0.2, test_fraction=0.1).split(
        frame, regression_y(100), "regression"
    )
    assert (len(split.train), len(split.valid), len(split.test)) == (70, 20, 10)
    assert_partition(split, 100)
    when = frame["when"].to_numpy()
    assert when[split.train].max() < when[split.valid].min()
    assert when[split.valid].max() < when[split.test].min()
    assert set(when[split.test]) == set(times[-10:].to_numpy())


def test_time_order_parses_text_dates_in_mixed_formats() -> None:
    text = ["2024-03-01", "1 January 2024", "2024/02/01", "05 Mar 2024", "2024-01-15"]
    split = TimeOrder("when", fraction=0.2).split(rows(5, when=text), regression_y(5), "regression")
    assert split.valid.tolist() == [3]


def test_time_order_orders_a_numeric_column_and_keeps_input_order_for_ties() -> None:
    frame = rows(10, step=[5, 1, 1, 1, 1, 1, 1, 1, 1, 1])
    split = TimeOrder("step", fraction=0.2).split(frame, regression_y(10), "regression")
    assert split.valid.tolist() == [0, 9]
    flat = TimeOrder("step", fraction=0.3).split(
        rows(10, step=[1] * 10), regression_y(10), "regression"
    )
    assert flat.valid.tolist() == [7, 8, 9]


def test_time_order_compares_times_across_time_zones() -> None:
    text = ["2024-01-01 10:00+02:00", "2024-01-01 09:00+00:00", "2024-01-01 08:30+00:00"]
    split = TimeOrder("when", fraction=0.34).split(
        rows(3, when=text), regression_y(3), "regression"
    )
    assert split.valid.tolist() == [1]


def test_time_order_names_an_unparsable_value_and_its_row() -> None:
    frame = rows(3, when=["2024-01-01", "soon", "2024-01-03"])
    with pytest.raises(ValidationSpecError, match=r"'soon' at row 2"):
        TimeOrder("when").split(frame, regression_y(3), "regression")


def test_time_order_counts_missing_values() -> None:
    frame = rows(4, when=[1.0, np.nan, 3.0, np.nan])
    with pytest.raises(ValidationSpecError, match="'when' has 2 missing values"):
        TimeOrder("when").split(frame, regression_y(4), "regression")


# ----------------------------------------------------------------------------- group holdout


@FAST
@given(
    sizes=st.lists(st.integers(1, 30), min_size=3, max_size=25),
    fraction=st.floats(0.05, 0.5),
    test_fraction=st.one_of(st.just(0.0), st.floats(0.05, 0.3)),
    seed=st.integers(0, 2**31 - 1),
)
def test_group_holdout_never_splits_a_group(
    sizes: list[int], fraction: float, test_fraction: float, seed: int
) -> None:
    groups = np.repeat([f"g{i}" for i in range(len(sizes))], sizes)
    groups = groups[np.random.RandomState(seed).permutation(len(groups))]
    n = len(groups)
    split = GroupHoldout("g", fraction, seed, test_fraction).split(
        rows(n, g=groups), regression_y(n), "regression"
    )
    assert_partition(split, n)
    sides = [set(groups[part]) for part in (split.train, split.valid, split.test)]
    assert not (sides[0] & sides[1]) and not (sides[0] & sides[2]) and not (sides[1] & sides[2])
    assert sides[0] and sides[1] and (bool(sides[2]) == bool(test_fraction))


def test_group_holdout_reaches_the_fraction_when_groups_allow_it() -> None:
    groups = np.repeat(np.arange(100), 10)
    split = GroupHoldout("store", fraction=0.2, test_fraction=0.1, seed=1).split(
        rows(1000, store=groups), regression_y(1000), "regression"
    )
    assert (len(split.train), len(split.valid), len(split.test)) == (700, 200, 100)


def test_group_holdout_gives_identical_arrays_every_run() -> None:
    frame = rows(200, store=np.arange(200) % 17)
    spec = GroupHoldout("store", seed=3)
    assert_same(
        spec.split(frame, regression_y(200), "regression"),
        spec.split(frame, regression_y(200), "regression"),
    )


def test_group_holdout_with_one_group_is_refused() -> None:
    with pytest.raises(ValidationSpecError, match="at least 2 groups.*it has 1"):
        GroupHoldout("store").split(rows(5, store=["a"] * 5), regression_y(5), "regression")


def test_group_holdout_with_a_test_part_needs_three_groups() -> None:
    with pytest.raises(ValidationSpecError, match="at least 3 groups.*it has 2"):
        GroupHoldout("store", test_fraction=0.1).split(
            rows(4, store=["a", "a", "b", "b"]), regression_y(4), "regression"
        )


def test_group_holdout_counts_missing_group_values() -> None:
    frame = rows(5, store=["a", None, "b", None, None])
    with pytest.raises(ValidationSpecError, match="'store' has 3 missing values"):
        GroupHoldout("store").split(frame, regression_y(5), "regression")


# ----------------------------------------------------------------------------- split column


def test_split_column_reads_train_valid_validation_and_test_in_any_case() -> None:
    labels = ["train", "VALID", " Validation ", "test", "Train", "train"]
    split = SplitColumn().split(rows(6, split=labels), regression_y(6), "regression")
    assert split.train.tolist() == [0, 4, 5]
    assert split.valid.tolist() == [1, 2]
    assert split.test.tolist() == [3]
    assert split.describe() == "3 fit, 2 validation, 1 test"


def test_split_column_without_test_rows_has_an_empty_test_part() -> None:
    split = SplitColumn("part").split(
        rows(3, part=["train", "valid", "train"]), regression_y(3), "regression"
    )
    assert split.test.dtype == np.int64 and len(split.test) == 0


@pytest.mark.parametrize(
    ("labels", "message"),
    [
        (
            ["train", "valid", "fit"],
            r"value 'fit' at row 3; accepted values: train, valid, validation, test",
        ),
        (["train", 1, "valid"], r"value 1 at row 2"),
        (["train", None, "valid"], r"a missing value at row 2"),
        (["valid", "valid", "test"], r"has no train rows"),
        (["train", "train", "test"], r"has no valid rows"),
    ],
)
def test_split_column_refuses_bad_labels_naming_the_value_and_row(
    labels: list, message: str
) -> None:
    frame = rows(3, split=pd.Series(labels, dtype=object))
    with pytest.raises(ValidationSpecError, match=message):
        SplitColumn().split(frame, regression_y(3), "regression")


# ----------------------------------------------------------------------------- spec errors


@pytest.mark.parametrize("fraction", [0, 1, -0.1, 1.5, float("nan")])
def test_fraction_outside_zero_to_one_is_refused(fraction: float) -> None:
    with pytest.raises(ValidationSpecError, match="fraction"):
        Holdout(fraction=fraction)


@pytest.mark.parametrize(
    "make",
    [
        lambda: Holdout(fraction="0.2"),  # type: ignore[arg-type]
        lambda: Holdout(seed=1.5),  # type: ignore[arg-type]
        lambda: Holdout(stratify="yes"),  # type: ignore[arg-type]
        lambda: KFold(folds=True),
        lambda: KFold(test_fraction=1.0),
        lambda: TimeOrder(""),
        lambda: GroupHoldout(3),  # type: ignore[arg-type]
    ],
)
def test_badly_typed_fields_are_refused(make) -> None:
    with pytest.raises(ValidationSpecError):
        make()


@pytest.mark.parametrize(
    "make",
    [
        lambda: Holdout(fraction=0.6, test_fraction=0.4),
        lambda: TimeOrder("t", fraction=0.9, test_fraction=0.2),
        lambda: GroupHoldout("g", fraction=0.5, test_fraction=0.5),
    ],
)
def test_fraction_plus_test_fraction_of_one_or_more_is_refused(make) -> None:
    with pytest.raises(ValidationSpecError, match="together they must be below 1"):
        make()


@pytest.mark.parametrize("folds", [1, 0, -3])
def test_fewer_than_two_folds_is_refused(folds: int) -> None:
    with pytest.raises(ValidationSpecError, match=rf"folds must be at least 2, got {folds}"):
        KFold(folds=folds)


@pytest.mark.parametrize("spec", [TimeOrder("when"), GroupHoldout("when"), SplitColumn("when")])
def test_a_column_missing_from_the_frame_is_named(spec) -> None:
    with pytest.raises(ValidationSpecError, match="column 'when' is not in the data"):
        spec.split(rows(10), regression_y(10), "regression")


@pytest.mark.parametrize(
    "spec", [Holdout(), TimeOrder("x"), Holdout(fraction=0.5, test_fraction=0.4)]
)
def test_a_split_that_leaves_no_rows_to_fit_on_is_refused(spec) -> None:
    with pytest.raises(ValidationSpecError, match="leave no rows to fit on"):
        spec.split(rows(1), regression_y(1), "regression")


def test_specs_are_frozen() -> None:
    with pytest.raises(dataclasses.FrozenInstanceError):
        Holdout().fraction = 0.5  # type: ignore[misc]


# ----------------------------------------------------------------------------- dicts and text


ALL_SPECS = [
    Holdout(fraction=0.25, seed=3, test_fraction=0.1, stratify=False),
    KFold(folds=7, seed=2, test_fraction=0.05),
    TimeOrder("when", fraction=0.3, test_fraction=0.1),
    GroupHoldout("store", fraction=0.15, seed=8),
    SplitColumn("part"),
]


@pytest.mark.parametrize("spec", ALL_SPECS, ids=lambda s: s.scheme)
def test_spec_from_dict_round_trips_every_scheme_through_json(spec) -> None:
    data = json.loads(json.dumps(spec.to_dict()))
    assert data["scheme"] == spec.scheme
    assert spec_from_dict(data) == spec


def test_to_dict_uses_the_recipe_keys() -> None:
    assert Holdout().to_dict() == {
        "scheme": "holdout",
        "fraction": 0.2,
        "seed": 0,
        "test_fraction": 0.0,
        "stratify": True,
    }
    assert KFold().to_dict() == {
        "scheme": "kfold",
        "folds": 5,
        "seed": 0,
        "test_fraction": 0.0,
        "stratify": True,
    }
    assert TimeOrder("d").to_dict() == {
        "scheme": "time",
        "column": "d",
        "fraction": 0.2,
        "test_fraction": 0.0,
    }
    assert SplitColumn().to_dict() == {"scheme": "column", "column": "split"}


def test_spec_from_dict_without_a_scheme_is_a_holdout() -> None:
    assert spec_from_dict({"fraction": 0.3}) == Holdout(fraction=0.3)


def test_spec_from_dict_names_an_unknown_scheme_and_lists_the_accepted_ones() -> None:
    with pytest.raises(ValidationSpecError, match=r"'random'.*holdout, kfold, time, group, column"):
        spec_from_dict({"scheme": "random"})


def test_spec_from_dict_names_an_unknown_key_and_lists_the_accepted_ones() -> None:
    with pytest.raises(
        ValidationSpecError, match=r"no key 'folds'; accepted keys: scheme, fraction, seed"
    ):
        spec_from_dict({"scheme": "holdout", "folds": 5})


def test_spec_from_dict_needs_a_column_for_time_and_group() -> None:
    for scheme in ("time", "group"):
        with pytest.raises(ValidationSpecError, match="needs a 'column'"):
            spec_from_dict({"scheme": scheme})


def test_spec_from_dict_refuses_bad_values() -> None:
    with pytest.raises(ValidationSpecError, match="folds must be at least 2"):
        spec_from_dict({"scheme": "kfold", "folds": 1})


def test_columns_used_names_the_column_each_scheme_reads() -> None:
    assert [s.columns_used for s in ALL_SPECS] == [(), (), ("when",), ("store",), ("part",)]


def test_describe_gives_one_line_for_the_user() -> None:
    assert (
        Holdout(fraction=0.2, seed=0, test_fraction=0.1).describe()
        == "holdout 20% (seed 0), locked test 10%"
    )
    assert KFold().describe() == "5-fold (seed 0)"
    for spec in ALL_SPECS:
        assert "\n" not in spec.describe() and spec.describe()


def test_split_describe_counts_the_parts() -> None:
    holdout = Holdout(fraction=0.2).split(rows(4000), regression_y(4000), "regression")
    assert holdout.describe() == "3,200 fit, 800 validation, 0 test"
    kfold = KFold(test_fraction=0.1).split(rows(4000), regression_y(4000), "regression")
    assert kfold.describe() == "5 folds over 3,600 rows, 400 test"
