"""Validation schemes: which rows the chain fits on, which score it, which are locked away.

A scheme is a small frozen spec (``Holdout``, ``KFold``, ``TimeOrder``, ``GroupHoldout``,
``SplitColumn``, and ``AllRows`` for fitting on every row with no validation). ``spec.split(frame, y, task)`` returns a ``Split`` of row positions
``0..n-1``. The locked test part is always carved first; fractions are of all rows. Every
random choice comes from ``np.random.RandomState(seed)`` and class allocations use integer
arithmetic, so the same spec and data give the same rows on every run and machine.
Holdout and KFold with the same seed and ``test_fraction`` lock the same test rows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from numbers import Integral, Real
from typing import Any, ClassVar, Literal

import numpy as np
import pandas as pd
from sklearn.model_selection import KFold as SklearnKFold
from sklearn.model_selection import StratifiedKFold

from .errors import ValidationSpecError
from .limits import MAX_FOLDS, MAX_SEED

#: the parts of a chain's rows: fit on (train), scored (valid), locked away (test)
Part = Literal["train", "valid", "test"]
SPLIT_LABELS = {"train": "train", "valid": "valid", "validation": "valid", "test": "test"}


@dataclass(frozen=True, eq=False)
class Split:
    """Row positions of each part: ``train`` (fit), ``valid`` (scored), ``test`` (locked).

    Each array is sorted int64. For k-fold, ``folds`` partitions ``train`` and ``valid`` is empty.
    """

    train: np.ndarray
    valid: np.ndarray
    test: np.ndarray
    folds: tuple[np.ndarray, ...] = ()

    def describe(self) -> str:
        """Return one line such as ``"3,200 fit, 800 validation, 0 test"``."""
        if self.folds:
            return f"{len(self.folds)} folds over {len(self.train):,} rows, {len(self.test):,} test"
        return f"{len(self.train):,} fit, {len(self.valid):,} validation, {len(self.test):,} test"


def _fraction(name: str, value: Any, *, zero_ok: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, Real) or math.isnan(float(value)):
        raise ValidationSpecError(f"validation {name} must be a number, got {value!r}", key=name)
    value = float(value)
    if not ((value >= 0 if zero_ok else value > 0) and value < 1):
        bounds = "[0, 1)" if zero_ok else "(0, 1)"
        raise ValidationSpecError(f"validation {name} must be in {bounds}, got {value:g}", key=name)
    return value


def _integer(name: str, value: Any, minimum: int | None = None, maximum: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral):
        raise ValidationSpecError(f"validation {name} must be a whole number, got {value!r}", key=name)
    whole = int(value)
    if minimum is not None and whole < minimum:
        raise ValidationSpecError(f"validation {name} must be at least {minimum}, got {whole}", key=name)
    if maximum is not None and whole > maximum:
        raise ValidationSpecError(f"validation {name} must be at most {maximum:,}, got {whole:,}", key=name)
    return whole


def _column_name(value: Any) -> str:
    if not isinstance(value, str) or not value:
        raise ValidationSpecError(f"validation column must be a column name, got {value!r}", key="column")
    return value


def _flag(value: Any) -> bool:
    if not isinstance(value, bool | np.bool_):
        raise ValidationSpecError(f"validation stratify must be true or false, got {value!r}", key="stratify")
    return bool(value)


FIELD_CHECKS: dict[str, Any] = {
    "fraction": lambda v: _fraction("fraction", v),
    "test_fraction": lambda v: _fraction("test_fraction", v, zero_ok=True),
    "folds": lambda v: _integer("folds", v, minimum=2, maximum=MAX_FOLDS),
    "seed": lambda v: _integer("seed", v, minimum=0, maximum=MAX_SEED),
    "column": _column_name,
    "stratify": _flag,
}


class _Scheme:
    """What every scheme shares: field checks, ``columns_used`` and ``to_dict``."""

    scheme: ClassVar[str]

    def __post_init__(self) -> None:
        for f in fields(self):  # type: ignore[arg-type]
            object.__setattr__(self, f.name, FIELD_CHECKS[f.name](getattr(self, f.name)))
        fraction, test = getattr(self, "fraction", 0.0), getattr(self, "test_fraction", 0.0)
        if fraction + test >= 1:
            raise ValidationSpecError(
                f"validation fraction {fraction:g} plus test_fraction {test:g} is "
                f"{fraction + test:g}; together they must be below 1", key="test_fraction"
            )

    @property
    def columns_used(self) -> tuple[str, ...]:
        """Return the data columns this scheme reads (empty for holdout and k-fold)."""
        column = getattr(self, "column", None)
        return (column,) if column else ()

    def to_dict(self) -> dict[str, Any]:
        """Return the ``[validation]`` table of this scheme: ``scheme`` and every field."""
        values = {f.name: getattr(self, f.name) for f in fields(self)}  # type: ignore[arg-type]
        return {"scheme": self.scheme, **values}


def _pct(value: float) -> str:
    return f"{round(value * 100, 2):g}%"


def _count(n: int, word: str) -> str:
    return f"{n:,} {word}{'' if n == 1 else 's'}"


def _locked(test_fraction: float) -> str:
    return f", locked test {_pct(test_fraction)}" if test_fraction else ""


def _part_size(fraction: float, n: int) -> int:
    """Return ``fraction * n`` rounded half up, and at least 1 when the fraction is above 0."""
    if fraction <= 0:
        return 0
    return max(1, math.floor(fraction * n + 0.5))


def _sizes(n: int, fraction: float, test_fraction: float, what: str) -> tuple[int, int]:
    """Return (validation rows, test rows) for ``n`` rows; raise when no row is left to fit on."""
    n_valid, n_test = _part_size(fraction, n), _part_size(test_fraction, n)
    if n - n_valid - n_test < 1:
        raise ValidationSpecError(
            f"{what}: validation {n_valid:,} and test {n_test:,} of {_count(n, 'row')} "
            "leave no rows to fit on"
        )
    return n_valid, n_test


def _strata(y: np.ndarray, task: str, stratify: bool) -> list[np.ndarray]:
    """Return the row positions of each class (binary or multiclass, stratified) or of all rows."""
    if task == "binary" and stratify:
        classes = [np.flatnonzero(y != 1), np.flatnonzero(y == 1)]
        return [c.astype(np.int64) for c in classes if len(c)]
    if task == "multiclass" and stratify:
        codes = y.astype(np.int64)
        return [np.flatnonzero(codes == k).astype(np.int64) for k in np.unique(codes)]
    return [np.arange(len(y), dtype=np.int64)]


def _class_codes(y: np.ndarray, task: str) -> np.ndarray:
    """Return each row's class code as scikit-learn's stratified folds read it (1 or 0 for binary)."""
    return (y == 1).astype(np.int64) if task == "binary" else y.astype(np.int64)


def _allocate(total: int, counts: list[int]) -> list[int]:
    """Return ``total`` shared over ``counts`` in proportion (largest remainder, exact integers)."""
    whole = sum(counts)
    if whole == 0:
        return [0] * len(counts)
    shares = [total * c // whole for c in counts]
    remainders = [total * c % whole for c in counts]
    for i in sorted(range(len(counts)), key=lambda i: -remainders[i])[: total - sum(shares)]:
        shares[i] += 1
    return shares


def _draw(
    strata: list[np.ndarray], sizes: list[int], seed: int
) -> tuple[list[np.ndarray], np.ndarray]:
    """Return parts of the given sizes drawn at random within each stratum, and the rest."""
    state = np.random.RandomState(seed)
    shuffled = [state.permutation(s) for s in strata]
    taken = [0] * len(strata)
    parts = []
    for size in sizes:
        counts = _allocate(size, [len(s) - t for s, t in zip(shuffled, taken, strict=True)])
        pieces = [s[t : t + c] for s, t, c in zip(shuffled, taken, counts, strict=True)]
        parts.append(np.sort(np.concatenate(pieces)).astype(np.int64))
        taken = [t + c for t, c in zip(taken, counts, strict=True)]
    rest = np.concatenate([s[t:] for s, t in zip(shuffled, taken, strict=True)])
    return parts, np.sort(rest).astype(np.int64)


def _column(frame: pd.DataFrame, name: str) -> pd.Series:
    if name not in frame.columns:
        shown = ", ".join(map(str, frame.columns[:8]))
        raise ValidationSpecError(f"validation column {name!r} is not in the data ({shown})")
    return frame[name].reset_index(drop=True)


def _check_rows(frame: pd.DataFrame, y: np.ndarray) -> np.ndarray:
    y = np.asarray(y, dtype=np.float64)
    if len(y) != len(frame):
        raise ValueError(f"y has {len(y)} values but the frame has {len(frame)} rows")
    return y


@dataclass(frozen=True)
class Holdout(_Scheme):
    """A seeded random holdout: ``fraction`` of rows scored, the rest fit on."""

    scheme: ClassVar[str] = "holdout"
    fraction: float = 0.2
    seed: int = 0
    test_fraction: float = 0.0
    stratify: bool = True

    def describe(self) -> str:
        """Return one line such as ``"holdout 20% (seed 0), locked test 10%"``."""
        plain = "" if self.stratify else ", not stratified"
        return (
            f"holdout {_pct(self.fraction)} (seed {self.seed}){plain}{_locked(self.test_fraction)}"
        )

    def split(self, frame: pd.DataFrame, y: np.ndarray, task: str, classes: tuple[str, ...] = ()) -> Split:
        """Return the split: test drawn first, then validation, stratified by class for binary and multiclass."""
        y = _check_rows(frame, y)
        n_valid, n_test = _sizes(len(y), self.fraction, self.test_fraction, self.describe())
        strata = _strata(y, task, self.stratify)
        (test, valid), train = _draw(strata, [n_test, n_valid], self.seed)
        return Split(train=train, valid=valid, test=test)


@dataclass(frozen=True)
class KFold(_Scheme):
    """K-fold cross-validation over the rows outside the locked test part."""

    scheme: ClassVar[str] = "kfold"
    folds: int = 5
    seed: int = 0
    test_fraction: float = 0.0
    stratify: bool = True

    def describe(self) -> str:
        """Return one line such as ``"5-fold (seed 0), locked test 10%"``."""
        plain = "" if self.stratify else ", not stratified"
        return f"{self.folds}-fold (seed {self.seed}){plain}{_locked(self.test_fraction)}"

    def split(self, frame: pd.DataFrame, y: np.ndarray, task: str, classes: tuple[str, ...] = ()) -> Split:
        """Return the split: test drawn first, then ``folds`` disjoint folds covering the rest.

        The folds are scikit-learn's ``StratifiedKFold`` (binary and multiclass, stratified) or
        ``KFold`` with ``shuffle=True, random_state=seed`` over the rest, each sorted. ``classes``
        names the classes in messages.
        """
        y = _check_rows(frame, y)
        n = len(y)
        n_test = _part_size(self.test_fraction, n)
        strata = _strata(y, task, self.stratify)
        (test,), rest = _draw(strata, [n_test], self.seed)
        outside = " outside the locked test part" if n_test else ""
        if len(rest) < self.folds:
            raise ValidationSpecError(
                f"{self.folds} folds need at least {self.folds} rows{outside}; "
                f"the data has {len(rest):,}"
            )
        y_rest = y[rest]
        stratified = len(strata) > 1
        codes = _class_codes(y_rest, task) if stratified else np.zeros(len(y_rest), dtype=np.int64)
        counts = np.bincount(codes, minlength=max(2, len(classes)))
        if stratified and counts.min() < self.folds:
            smallest = int(counts.argmin())
            name = repr(classes[smallest]) if task == "multiclass" and classes else str(smallest)
            raise ValidationSpecError(
                f"{self.folds} stratified folds need at least {self.folds} rows of each class"
                f"{outside}; class {name} has {counts.min()} (or set stratify = false)"
            )
        kind = StratifiedKFold if stratified else SklearnKFold
        splitter = kind(self.folds, shuffle=True, random_state=self.seed)
        chunks = splitter.split(np.zeros((len(rest), 1)), codes)
        folds = tuple(np.sort(rest[held]).astype(np.int64) for _, held in chunks)
        return Split(train=rest, valid=np.empty(0, dtype=np.int64), test=test, folds=folds)


@dataclass(frozen=True)
class TimeOrder(_Scheme):
    """A time-ordered holdout: the latest rows by ``column`` are scored (and locked before that)."""

    column: str
    scheme: ClassVar[str] = "time"
    fraction: float = 0.2
    test_fraction: float = 0.0

    def describe(self) -> str:
        """Return one line such as ``"latest 20% by 'date' as validation, locked test 10%"``."""
        locked = f", latest {_pct(self.test_fraction)} locked as test" if self.test_fraction else ""
        return f"latest {_pct(self.fraction)} by {self.column!r} as validation{locked}"

    def split(self, frame: pd.DataFrame, y: np.ndarray, task: str, classes: tuple[str, ...] = ()) -> Split:
        """Return the split: the latest rows are test, the next latest validation (stable ties)."""
        y = _check_rows(frame, y)
        n_valid, n_test = _sizes(len(y), self.fraction, self.test_fraction, self.describe())
        keys = _order_keys(_column(frame, self.column), self.column)
        order = np.argsort(keys, kind="stable").astype(np.int64)
        cuts = [len(y) - n_valid - n_test, len(y) - n_test]
        train, valid, test = (np.sort(part) for part in np.split(order, cuts))
        return Split(train=train, valid=valid, test=test)


def _order_keys(values: pd.Series, name: str) -> np.ndarray:
    """Return sortable keys of an order column: datetimes, numbers, or text parsed as either."""
    missing = int(values.isna().sum())
    if missing:
        raise ValidationSpecError(
            f"order column {name!r} has {_count(missing, 'missing value')}; every row needs a time"
        )
    dtype = values.dtype
    if isinstance(dtype, pd.DatetimeTZDtype):
        return values.dt.tz_convert("UTC").dt.tz_localize(None).to_numpy("datetime64[ns]")
    if pd.api.types.is_datetime64_dtype(dtype) or pd.api.types.is_timedelta64_dtype(dtype):
        return values.to_numpy()
    if isinstance(dtype, pd.CategoricalDtype) and dtype.ordered:
        return values.cat.codes.to_numpy()
    if pd.api.types.is_numeric_dtype(dtype):
        return values.to_numpy(dtype=np.float64)
    numbers = pd.to_numeric(values, errors="coerce")
    if numbers.notna().all():
        return numbers.to_numpy(dtype=np.float64)
    try:
        times = pd.to_datetime(values, format="mixed", errors="coerce", utc=True)
    except (ValueError, TypeError, OverflowError) as err:
        raise ValidationSpecError(f"order column {name!r} cannot be read as times: {err}") from err
    bad = np.flatnonzero(times.isna().to_numpy())
    if len(bad):
        row = int(bad[0])
        raise ValidationSpecError(
            f"order column {name!r} cannot be ordered: {values.iloc[row]!r} at row {row + 1} "
            f"is not a date, time or number ({_count(len(bad), 'unparsable value')} in all)"
        )
    return times.dt.tz_localize(None).to_numpy("datetime64[ns]")


@dataclass(frozen=True)
class GroupHoldout(_Scheme):
    """A seeded holdout of whole groups: no value of ``column`` is on two sides."""

    column: str
    scheme: ClassVar[str] = "group"
    fraction: float = 0.2
    seed: int = 0
    test_fraction: float = 0.0

    def describe(self) -> str:
        """Return one line such as ``"group holdout 20% by 'store' (seed 0)"``."""
        return (
            f"group holdout {_pct(self.fraction)} by {self.column!r} (seed {self.seed})"
            f"{_locked(self.test_fraction)}"
        )

    def split(self, frame: pd.DataFrame, y: np.ndarray, task: str, classes: tuple[str, ...] = ()) -> Split:
        """Return the split: random whole groups for test, then validation, as near each fraction."""
        y = _check_rows(frame, y)
        values = _column(frame, self.column)
        codes, uniques = pd.factorize(values, use_na_sentinel=True)
        missing = int(np.sum(codes < 0))
        if missing:
            raise ValidationSpecError(
                f"group column {self.column!r} has {_count(missing, 'missing value')}; "
                "every row needs a group"
            )
        needed = 3 if self.test_fraction else 2
        if len(uniques) < needed:
            parts = "fit, validation and test" if self.test_fraction else "fit and validation"
            raise ValidationSpecError(
                f"group holdout needs at least {needed} groups in column {self.column!r} "
                f"({parts}); it has {len(uniques)}"
            )
        sizes = np.bincount(codes, minlength=len(uniques))
        order = [int(g) for g in np.random.RandomState(self.seed).permutation(len(uniques))]
        n = len(codes)
        test_groups: list[int] = []
        if self.test_fraction:
            test_groups = _choose_groups(order, sizes, self.test_fraction * n, reserve=2)
        locked = set(test_groups)
        left = [g for g in order if g not in locked]
        valid_groups = _choose_groups(left, sizes, self.fraction * n, reserve=1)
        side = np.zeros(n, dtype=np.int8)  # 0 fit, 1 validation, 2 test
        side[np.isin(codes, valid_groups)] = 1
        side[np.isin(codes, test_groups)] = 2
        train, valid, test = (np.flatnonzero(side == k).astype(np.int64) for k in range(3))
        return Split(train=train, valid=valid, test=test)


def _choose_groups(order: list[int], sizes: np.ndarray, target: float, reserve: int) -> list[int]:
    """Return groups taken in ``order`` while each brings the row count nearer ``target``.

    At least one group is taken and at least ``reserve`` groups are left for the other parts.
    """
    chosen: list[int] = []
    total = 0
    for group in order:
        if len(order) - len(chosen) <= reserve:
            break
        if abs(total + sizes[group] - target) < abs(total - target):
            chosen.append(group)
            total += int(sizes[group])
    if not chosen:
        chosen.append(min(order, key=lambda g: abs(sizes[g] - target)))
    return chosen


@dataclass(frozen=True)
class SplitColumn(_Scheme):
    """The user's own split: ``column`` says train, valid (or validation) or test for each row."""

    scheme: ClassVar[str] = "column"
    column: str = "split"

    def describe(self) -> str:
        """Return one line such as ``"split column 'split' (train / valid / test)"``."""
        return f"split column {self.column!r} (train / valid / test)"

    def split(self, frame: pd.DataFrame, y: np.ndarray, task: str, classes: tuple[str, ...] = ()) -> Split:
        """Return the split the column names; any other value raises, naming it and its row."""
        _check_rows(frame, y)
        values = _column(frame, self.column)
        labels = values.astype(str).str.strip().str.lower().map(SPLIT_LABELS)
        bad = np.flatnonzero(labels.isna().to_numpy() | values.isna().to_numpy())
        if len(bad):
            value = values.iloc[bad[0]]
            shown = "a missing value" if pd.isna(value) else f"value {value!r}"
            raise ValidationSpecError(
                f"split column {self.column!r} has {shown} at row {bad[0] + 1}; "
                f"accepted values: {', '.join(SPLIT_LABELS)}"
            )
        labels_array = labels.to_numpy(dtype=object)
        parts = {k: np.flatnonzero(labels_array == k) for k in ("train", "valid", "test")}
        for part in ("train", "valid"):
            if not len(parts[part]):
                raise ValidationSpecError(f"split column {self.column!r} has no {part} rows")
        return Split(train=parts["train"].astype(np.int64), valid=parts["valid"].astype(np.int64),
                     test=parts["test"].astype(np.int64))


@dataclass(frozen=True)
class AllRows(_Scheme):
    """No validation: every row is fit on; the validation and test parts are empty.

    Validation scores of such a chain are NaN. Meant for fitting inside an outer loop that
    does its own validation, such as scikit-learn's ``cross_val_score``.
    """

    scheme: ClassVar[str] = "none"

    def describe(self) -> str:
        """Return the one line ``"every row fits (no validation)"``."""
        return "every row fits (no validation)"

    def split(self, frame: pd.DataFrame, y: np.ndarray, task: str, classes: tuple[str, ...] = ()) -> Split:
        """Return the split with every row in ``train`` and empty ``valid`` and ``test``."""
        y = _check_rows(frame, y)
        if len(y) < 1:
            raise ValidationSpecError(f"{self.describe()}: the data has no rows to fit on")
        empty = np.empty(0, dtype=np.int64)
        return Split(train=np.arange(len(y), dtype=np.int64), valid=empty, test=empty.copy())


ValidationSpec = Holdout | KFold | TimeOrder | GroupHoldout | SplitColumn | AllRows
SCHEMES: dict[str, type[ValidationSpec]] = {
    cls.scheme: cls for cls in (Holdout, KFold, TimeOrder, GroupHoldout, SplitColumn, AllRows)
}


def spec_from_dict(data: dict[str, Any]) -> ValidationSpec:
    """Return the validation spec a ``[validation]`` table describes (the inverse of ``to_dict``).

    ``scheme`` defaults to ``"holdout"``. An unknown scheme or key, a missing column, or a bad
    value raises ValidationSpecError naming it.
    """
    if not isinstance(data, dict):
        raise ValidationSpecError(f"validation must be a table, got {type(data).__name__}")
    values = dict(data)
    scheme = values.pop("scheme", "holdout")
    if scheme not in SCHEMES:
        raise ValidationSpecError(
            f"unknown validation scheme {scheme!r}; accepted schemes: {', '.join(SCHEMES)}", key="scheme"
        )
    cls = SCHEMES[scheme]
    known = [f.name for f in fields(cls)]
    unknown = [key for key in values if key not in known]
    if unknown:
        raise ValidationSpecError(
            f"validation scheme {scheme!r} has no key {unknown[0]!r}; "
            f"accepted keys: {', '.join(['scheme', *known])}", key=unknown[0]
        )
    if cls in (TimeOrder, GroupHoldout) and "column" not in values:
        raise ValidationSpecError(f"validation scheme {scheme!r} needs a 'column'", key="column")
    return cls(**values)


def describe_stored(data: Any) -> str | None:
    """Return the one line that describes a stored ``[validation]`` table (a chain file's or a
    session's), or None when it is not a table this version reads."""
    try:
        return spec_from_dict(data).describe()
    except (ValidationSpecError, TypeError):
        return None
