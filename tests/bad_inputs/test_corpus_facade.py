"""Every bad input of the corpus through the Python facade: a clear DataError, or the documented handling.

The facade path is ``stages.Chain.from_file(path, target=...)`` then one ``linear`` stage.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
from corpus import GOOD_NAME, build_corpus, corpus_entries, pytest_params

import stages
from stages.errors import DataError

DOCS = Path(__file__).resolve().parents[2] / "docs" / "bad-inputs.md"


@pytest.fixture(scope="module")
def corpus_files(tmp_path_factory) -> dict[str, Path]:
    """Return the path of every corpus entry, built once for this module."""
    return build_corpus(tmp_path_factory.mktemp("corpus"))


def fit_one_linear(path: Path, target: str) -> stages.Chain:
    chain = stages.Chain.from_file(path, target=target)
    chain.add("linear")
    return chain


def extra_checks(name: str, chain: stages.Chain) -> None:
    """Check what a handling promises beyond rows, features and notes."""
    if name == "bom":
        assert chain.schema.names[0] == "x1"  # not "\ufeffx1"
    if name == "quoted_newlines":
        remark = chain.schema.columns[chain.schema.names.index("remark")]
        assert set(remark.levels) == {"late\nagain", "on time"}
    if name in ("semicolons", "tabs", "mixed_endings", "cr_only", "bom"):
        good = stages.Chain.from_file(Path(chain.data_path).parent / GOOD_NAME, target="y")
        assert np.array_equal(good.y, chain.y) and np.array_equal(good.matrix, chain.matrix)


@pytest.mark.parametrize("entry", pytest_params())
def test_each_bad_input_gives_a_clear_error_or_its_documented_handling(entry, corpus_files):
    path = corpus_files[entry.name]
    if entry.is_error:
        with pytest.raises(DataError) as err:
            fit_one_linear(path, entry.target)
        message = str(err.value)
        assert "\n" not in message, message
        assert all(words in message for words in entry.error), message
        assert str(path.parent) not in message  # the file is named, not the folders it sits in
        return
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a handled input is handled quietly, not with a library's warning
        chain = fit_one_linear(path, entry.target)
    assert len(chain.y) == entry.rows and len(chain.schema.names) == entry.features
    if entry.note:
        assert any(all(words in note for words in entry.note) for note in chain.notes), chain.notes
    assert len(chain) == 1 and np.isfinite(chain.outputs()[0]).all()
    extra_checks(entry.name, chain)


def test_every_entry_is_an_error_or_a_handling_and_names_are_unique():
    entries = corpus_entries()
    assert len({e.name for e in entries}) == len(entries)
    for entry in entries:
        assert entry.is_error != bool(entry.handling), entry.name
        assert entry.is_error or (entry.rows is not None and entry.features is not None), entry.name


def test_the_documentation_lists_every_entry():
    table = DOCS.read_text(encoding="utf-8")
    for entry in corpus_entries():
        assert f"| {entry.input} |" in table, entry.input
