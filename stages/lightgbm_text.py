"""LightGBM's model text, checked line by line before LightGBM parses it.

LightGBM trusts its model text: a text cut short or a tree block whose length differs from
``tree_sizes`` reads past the end, a child index out of range or a cycle crashes or hangs
its prediction, a split feature past the input reads outside the row, and ``num_class``
sizes an allocation before anything is checked. ``check_model_text`` reads the whole text
with the stricter rules below and raises ChainFileError naming the tree and the problem;
only a text that passes goes to ``lightgbm.Booster``:

* the header holds known keys only, ``num_class`` is at most MAX_CLASSES (and, where the
  chain's class count is known, equal to it, with one tree per class a round for a multiclass
  model) and the inputs are exactly the stage's (``max_feature_idx``, ``feature_names``,
  ``feature_infos``);
* every tree block is numbered in order, every array has the length its ``num_leaves``
  implies, children form a tree (``tree_structure.check_links``), split features are inputs
  of the stage, thresholds, leaf values and linear-leaf coefficients are finite, categorical
  splits point inside their bitsets, and ``tree_sizes`` gives each block's exact length;
* every number is written plainly (``1.5e-3``, never ``1_000`` or ``0x10``, which LightGBM
  would read differently), and the text holds no NUL or carriage return;
* what follows the trees is the importance list, the parameter list and
  ``pandas_categorical:null``, each line in its plain form.
"""

from __future__ import annotations

import contextlib
import math
import os
import re
import sys
from collections.abc import Iterator

import numpy as np

from .errors import ChainFileError
from .limits import MAX_CLASSES, MAX_COLUMNS
from .tree_structure import check_links

#: LightGBM's own upper limit on the leaves of one tree
MAX_LEAVES = 131072
HEADER_KEYS = frozenset({"version", "num_class", "num_tree_per_iteration", "label_index", "max_feature_idx",
                         "objective", "feature_names", "feature_infos", "tree_sizes", "monotone_constraints"})
HEADER_FLAGS = frozenset({"average_output"})
VERSIONS = ("v2", "v3", "v4")
_INTERNAL = ("split_feature", "split_gain", "threshold", "decision_type", "left_child", "right_child",
             "internal_value", "internal_weight", "internal_count")
_LEAF = ("leaf_value", "leaf_weight", "leaf_count", "leaf_const", "num_features")
TREE_KEYS = frozenset({"num_leaves", "num_cat", *_INTERNAL, *_LEAF, "cat_boundaries", "cat_threshold",
                       "is_linear", "leaf_features", "leaf_coeff", "shrinkage"})
_WHOLE_TEXT = r"-?[0-9]{1,18}"
_NUMBER_TEXT = r"(?:[-+]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]{1,4})?|[-+]?inf|-?nan)"
_WHOLE = re.compile(_WHOLE_TEXT)
_NUMBER = re.compile(_NUMBER_TEXT)
_WHOLES = re.compile(rf"{_WHOLE_TEXT}(?: {_WHOLE_TEXT})*")
_NUMBERS = re.compile(rf"{_NUMBER_TEXT}(?: {_NUMBER_TEXT})*")
_TAIL_LINE = re.compile(r"|feature_importances:|parameters:|end of parameters|pandas_categorical:null|"
                        r"[^=\s\[\]]{1,256}=[0-9]{1,19}|\[[a-z0-9_]{1,64}: [^\]\n]{0,4096}\]")
#: decision_type bits: 1 categorical, 2 missing goes left, bits 2-3 the missing type (0, 1 or 2)
_MAX_DECISION = 11


def check_model_text(text: str, n_features: int | None, what: str = "the LightGBM model",
                     n_classes: int | None = None) -> None:
    """Raise ChainFileError unless ``text`` is a LightGBM model LightGBM can load safely over ``n_features``
    inputs (None: as many as its header says) giving ``n_classes`` raw scores a row (None: any count)."""
    if "\x00" in text or "\r" in text:
        raise ChainFileError(f"{what} holds a NUL or carriage-return character")
    lines = text.split("\n")
    header, at = _read_header(lines, what)
    if "end of trees" not in lines:  # wherever the cut fell, even inside a line
        raise ChainFileError(f"{what} ends before 'end of trees' (the text was cut short)")
    if n_features is None:
        n_features = _whole(header.get("max_feature_idx", "-1"), "max_feature_idx", what) + 1
        if not 1 <= n_features <= MAX_COLUMNS:
            raise ChainFileError(f"{what} reads {n_features:,} features")
    _check_header(header, n_features, what)
    if n_classes is not None:
        found = int(header["num_class"])
        if found != n_classes or int(header["num_tree_per_iteration"]) != n_classes:
            raise ChainFileError(f"{what} gives {found:,} raw scores a row; the chain has {n_classes}")
    trees, blocks, at = _read_trees(lines, at, what)
    per_iteration = int(header["num_tree_per_iteration"])
    if not trees or len(trees) % per_iteration:
        raise ChainFileError(f"{what} holds {len(trees)} trees, not a whole number of rounds of {per_iteration}")
    for number, tree in enumerate(trees):
        _check_tree(tree, n_features, f"{what}: tree {number}")
    if "tree_sizes" in header:
        sizes = _numbers(header["tree_sizes"], "tree_sizes", what, whole=True)
        if sizes.tolist() != blocks:
            raise ChainFileError(f"{what}: its tree sizes do not match its trees (the text was cut or edited)")
    for line in lines[at:]:
        if not _TAIL_LINE.fullmatch(line):
            raise ChainFileError(f"{what} has an unexpected line after its trees: {line[:60]!r}")
    if "pandas_categorical:null" not in lines[at:]:
        raise ChainFileError(f"{what} does not end with pandas_categorical:null")


def _read_header(lines: list[str], what: str) -> tuple[dict[str, str], int]:
    if not lines or lines[0] != "tree":
        raise ChainFileError(f"{what} is not a LightGBM model (it does not start with LightGBM's 'tree' line)")
    header: dict[str, str] = {}
    at = 1
    while at < len(lines) and lines[at] != "":
        key, equals, value = lines[at].partition("=")
        if not equals and key in HEADER_FLAGS:
            header[key] = ""
        elif key not in HEADER_KEYS or key in header:
            raise ChainFileError(f"{what} has an unknown or repeated header line {lines[at][:60]!r}")
        else:
            header[key] = value
        at += 1
    return header, at


def _check_header(header: dict[str, str], n_features: int, what: str) -> None:
    for key in ("version", "num_class", "num_tree_per_iteration", "max_feature_idx", "feature_names"):
        if key not in header:
            raise ChainFileError(f"{what} has no {key} in its header")
    if header["version"] not in VERSIONS:
        raise ChainFileError(f"{what} has version {header['version'][:20]!r}; this remnant reads {', '.join(VERSIONS)}")
    classes = _whole(header["num_class"], "num_class", what)
    per_iteration = _whole(header["num_tree_per_iteration"], "num_tree_per_iteration", what)
    if not 1 <= classes <= MAX_CLASSES or per_iteration not in (1, classes):
        raise ChainFileError(f"{what} declares {classes:,} classes and {per_iteration:,} trees a round "
                             f"(at most {MAX_CLASSES:,} classes are read)")
    if _whole(header["max_feature_idx"], "max_feature_idx", what) != n_features - 1:
        raise ChainFileError(f"{what} reads {int(header['max_feature_idx']) + 1:,} features; the stage has {n_features:,}")
    for key in ("feature_names", "feature_infos"):
        if key in header and len(header[key].split(" ")) != n_features:
            raise ChainFileError(f"{what} lists {len(header[key].split(' ')):,} {key}; the stage has {n_features:,}")
    if "label_index" in header and not 0 <= _whole(header["label_index"], "label_index", what) <= 1_000_000:
        raise ChainFileError(f"{what} has a label_index out of range")


def _read_trees(lines: list[str], at: int, what: str) -> tuple[list[dict[str, str]], list[int], int]:
    """Return each tree's key-value lines, each block's length in characters, and where the trees end."""
    trees: list[dict[str, str]] = []
    blocks: list[int] = []
    while at < len(lines) and lines[at] == "":
        at += 1
    start = None
    while at < len(lines):
        line = lines[at]
        if line == "end of trees":
            if start is not None:
                blocks.append(start[1])
            return trees, blocks, at + 1
        if line != f"Tree={len(trees)}":
            raise ChainFileError(f"{what}: expected 'Tree={len(trees)}' or 'end of trees', found {line[:60]!r}")
        if start is not None:
            blocks.append(start[1])
        tree, used = _read_tree(lines, at + 1, len(trees), what)
        length = len(line) + 1 + sum(len(lines[i]) + 1 for i in range(at + 1, used))
        start = (at, length)
        trees.append(tree)
        at = used
    raise ChainFileError(f"{what} ends before 'end of trees' (the text was cut short)")


def _read_tree(lines: list[str], at: int, number: int, what: str) -> tuple[dict[str, str], int]:
    """Return one tree's key-value pairs and the index of the next block's first line (blank lines included)."""
    tree: dict[str, str] = {}
    while at < len(lines) and lines[at] != "":
        key, equals, value = lines[at].partition("=")
        if not equals or key not in TREE_KEYS or key in tree:
            raise ChainFileError(f"{what}: tree {number} has an unknown or repeated line {lines[at][:60]!r}")
        tree[key] = value
        at += 1
    while at < len(lines) and lines[at] == "":
        at += 1
    return tree, at


def _check_tree(tree: dict[str, str], n_features: int, what: str) -> None:
    for key in ("num_leaves", "leaf_value"):
        if key not in tree:
            raise ChainFileError(f"{what} has no {key}")
    leaves = _whole(tree["num_leaves"], "num_leaves", what)
    if not 1 <= leaves <= MAX_LEAVES:
        raise ChainFileError(f"{what} has {leaves:,} leaves (1 to {MAX_LEAVES:,} are possible)")
    arrays = {key: _numbers(tree.get(key, ""), key, what, whole=key in _WHOLE_KEYS) for key in (*_INTERNAL, *_LEAF)
              if key in tree}
    for key, values in arrays.items():
        expected = leaves - 1 if key in _INTERNAL else leaves
        if len(values) != expected and not (key in _OPTIONAL and not len(values)):
            raise ChainFileError(f"{what} has {len(values):,} values in {key}; {expected:,} leaves need {expected:,}")
    _check_finite(arrays, ("leaf_value", "leaf_const"), what)
    if not math.isfinite(_number(tree.get("shrinkage", "1"), "shrinkage", what)):
        raise ChainFileError(f"{what} has a shrinkage that is not a finite number")
    if leaves == 1:
        return
    for key in ("split_feature", "threshold", "decision_type", "left_child", "right_child"):
        if key not in arrays:
            raise ChainFileError(f"{what} has no {key}")
    _check_children(arrays["left_child"], arrays["right_child"], leaves, what)
    features = np.asarray(arrays["split_feature"], dtype=np.int64)
    if features.min() < 0 or features.max() >= n_features:
        raise ChainFileError(f"{what} splits on feature {int(features.max() if features.max() >= n_features else features.min()):,}; "
                             f"the stage has {n_features:,}")
    _check_splits(tree, arrays, what)
    if tree.get("is_linear", "0") not in ("0", "1"):
        raise ChainFileError(f"{what} has is_linear {tree['is_linear'][:20]!r}")
    if tree.get("is_linear") == "1":
        _check_linear_leaves(tree, arrays, leaves, n_features, what)


_WHOLE_KEYS = frozenset({"split_feature", "decision_type", "left_child", "right_child", "internal_count",
                         "leaf_count", "num_features"})
#: arrays LightGBM writes empty for single-leaf trees or older versions
_OPTIONAL = frozenset({"split_gain", "internal_value", "internal_weight", "internal_count", "leaf_weight", "leaf_count"})


def _check_children(left: np.ndarray, right: np.ndarray, leaves: int, what: str) -> None:
    """Children >= 0 are internal nodes; a negative child ``c`` is leaf ``~c``. Map both onto one node list."""
    internal = leaves - 1
    children = np.concatenate([left, right])
    bad = ((children >= 0) & (children >= internal)) | ((children < 0) & (~children >= leaves))
    if bad.any():
        raise ChainFileError(f"{what} has a child index {int(children[bad][0]):,} outside its {leaves:,} leaves")
    nodes = np.where(children >= 0, children, internal + ~children)
    check_links(nodes[:len(left)], nodes[len(left):], 2 * leaves - 1, what)


def _check_splits(tree: dict[str, str], arrays: dict[str, np.ndarray], what: str) -> None:
    decisions = np.asarray(arrays["decision_type"], dtype=np.int64)
    if decisions.min() < 0 or decisions.max() > _MAX_DECISION or ((decisions >> 2) & 3 == 3).any():
        raise ChainFileError(f"{what} has a decision type LightGBM does not write")
    thresholds = np.asarray(arrays["threshold"], dtype=np.float64)
    categorical = (decisions & 1).astype(bool)
    if not np.isfinite(thresholds[~categorical]).all():
        raise ChainFileError(f"{what} has a split threshold that is not a finite number")
    n_cat = _whole(tree.get("num_cat", "0"), "num_cat", what)
    if not categorical.any() and n_cat == 0:
        return
    cats = thresholds[categorical]
    if n_cat < 1 or (cats.size and ((cats != np.round(cats)).any() or cats.min() < 0 or cats.max() >= n_cat)):
        raise ChainFileError(f"{what} has a categorical split that points outside its {n_cat} category sets")
    bounds = _numbers(tree.get("cat_boundaries", ""), "cat_boundaries", what, whole=True)
    words = _numbers(tree.get("cat_threshold", ""), "cat_threshold", what, whole=True)
    if len(bounds) != n_cat + 1 or bounds[0] != 0 or bounds[-1] != len(words) or np.any(np.diff(bounds) < 0):
        raise ChainFileError(f"{what} has category sets whose boundaries do not match their bits")
    if ((words < 0) | (words >= 2**32)).any():
        raise ChainFileError(f"{what} has a category bitset word out of range")


def _check_linear_leaves(tree: dict[str, str], arrays: dict[str, np.ndarray], leaves: int, n_features: int,
                         what: str) -> None:
    counts = arrays.get("num_features")
    if counts is None or "leaf_const" not in arrays or (counts < 0).any() or (counts > n_features).any():
        raise ChainFileError(f"{what} is a linear tree without valid leaf feature counts")
    features = _numbers(tree.get("leaf_features", ""), "leaf_features", what, whole=True, spaced=True)
    coefficients = _numbers(tree.get("leaf_coeff", ""), "leaf_coeff", what, spaced=True)
    if len(features) != sum(counts) or len(coefficients) != sum(counts):
        raise ChainFileError(f"{what} has {len(features):,} leaf features and {len(coefficients):,} coefficients "
                             f"for {sum(counts):,}")
    if ((features < 0) | (features >= n_features)).any() or not np.isfinite(coefficients).all():
        raise ChainFileError(f"{what} has a linear leaf over a feature out of range or a coefficient not finite")


def _check_finite(arrays: dict[str, np.ndarray], keys: tuple[str, ...], what: str) -> None:
    for key in keys:
        if key in arrays and not np.isfinite(arrays[key]).all():
            raise ChainFileError(f"{what} has a {key.replace('_', ' ')} that is not a finite number")


def _numbers(value: str, key: str, what: str, whole: bool = False, spaced: bool = False) -> np.ndarray:
    """Return the numbers of ``value``, one space apart (``spaced``: any run of spaces separates them)."""
    if spaced:
        value = " ".join(t for t in value.split(" ") if t)
    dtype = np.int64 if whole else np.float64
    if value == "":
        return np.empty(0, dtype=dtype)
    if not (_WHOLES if whole else _NUMBERS).fullmatch(value):
        raise ChainFileError(f"{what} has {key} values that are not plainly written "
                             f"{'whole numbers' if whole else 'numbers'} ({value[:40]!r})")
    return np.array(value.split(" "), dtype=dtype)


def _whole(token: str, key: str, what: str) -> int:
    if not _WHOLE.fullmatch(token):
        raise ChainFileError(f"{what} has {key} {token[:20]!r}, not a plainly written whole number")
    return int(token)


def _number(token: str, key: str, what: str) -> float:
    if not _NUMBER.fullmatch(token):
        raise ChainFileError(f"{what} has {key} {token[:20]!r}, not a plainly written number")
    return float(token)


@contextlib.contextmanager
def quiet_native_log() -> Iterator[None]:
    """Silence LightGBM inside the block: its log callback, and the process's standard error, where its
    C++ code writes ``[Fatal]`` lines directly (they would precede our one error line)."""
    import lightgbm.basic as basic

    saved = (basic._LOGGER, basic._INFO_METHOD_NAME, basic._WARNING_METHOD_NAME)
    basic.register_logger(_Silent())
    try:
        with _stderr_silenced():
            yield
    finally:
        basic._LOGGER, basic._INFO_METHOD_NAME, basic._WARNING_METHOD_NAME = saved


@contextlib.contextmanager
def _stderr_silenced() -> Iterator[None]:
    """Point file descriptor 2 at the null device inside the block (nothing happens where it cannot be)."""
    try:
        sys.stderr.flush()
        kept = os.dup(2)
        null = os.open(os.devnull, os.O_WRONLY)
    except (OSError, ValueError, AttributeError):
        yield
        return
    try:
        os.dup2(null, 2)
        yield
    finally:
        os.dup2(kept, 2)
        os.close(kept)
        os.close(null)


class _Silent:
    """A logger that drops every message."""

    def info(self, message: str) -> None:
        """Drop an information message."""

    def warning(self, message: str) -> None:
        """Drop a warning."""
