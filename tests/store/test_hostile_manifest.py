"""A manifest edited by a stranger is checked against its schema: every confusion is one line, never a traceback.

The manifest's fields reach ``remnant show`` and ``remnant predict`` (versions, validation,
rows, schema roles and levels, scores ...). Each is checked for type, range and size when the
file is loaded, so a confused field is a ChainFileError naming the key, or the file loads and
every reader of it works. Hypothesis swaps any value of a real manifest for values of the
wrong type, out of range, huge or deeply nested.
"""

from __future__ import annotations

import io
import json
import warnings
from contextlib import redirect_stderr, redirect_stdout, suppress

import pytest
from hostile import manifest_of, members_of, write_members
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import stages
import tui.cli
from stages.errors import RemnantError

FUZZ = settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                        HealthCheck.too_slow])


def key_paths(value, prefix=()):
    """Yield the key path of every value inside a manifest."""
    yield prefix
    if isinstance(value, dict):
        for key, inner in value.items():
            yield from key_paths(inner, (*prefix, key))
    elif isinstance(value, list):
        for i, inner in enumerate(value[:3]):
            yield from key_paths(inner, (*prefix, i))


def _deep(depth: int):
    value: object = 0
    for _ in range(depth):
        value = [value]
    return value


#: values of the wrong type, out of range, huge or deep
CONFUSERS = st.one_of(
    st.none(), st.booleans(), st.integers(-(2**70), 2**70), st.sampled_from([-1, 0, 2**31, 2**63, 2**64]),
    st.floats(allow_nan=False, allow_infinity=False), st.sampled_from([1e308, -1e308, 5e-324]),
    st.text(max_size=12), st.just("x" * 100_000), st.lists(st.integers(), max_size=4),
    st.just(list(range(200_000))), st.just(_deep(200)), st.dictionaries(st.text(max_size=5), st.integers(), max_size=3),
    st.just({"k" * 300: 1}),
)


def edited(base: bytes, path: tuple, value: object, delete: bool) -> bytes:
    members = members_of_bytes(base)
    manifest = json.loads(members["manifest.json"])
    holder = manifest
    for key in path[:-1]:
        holder = holder[key]
    if delete and isinstance(holder, dict):
        del holder[path[-1]]
    else:
        holder[path[-1]] = value
    members["manifest.json"] = json.dumps(manifest).encode()
    buffer = io.BytesIO()
    import zipfile

    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, payload in members.items():
            archive.writestr(name, payload)
    return buffer.getvalue()


def members_of_bytes(data: bytes) -> dict[str, bytes]:
    import zipfile

    with zipfile.ZipFile(io.BytesIO(data)) as archive:
        return {name: archive.read(name) for name in archive.namelist()}


@pytest.fixture(scope="module")
def base_bytes(base_chain) -> bytes:
    return base_chain.read_bytes()


def read_everything(path, data) -> None:
    """Load ``path`` and use it as show and predict do; anything but a RemnantError fails the test."""
    from tui.table_text import describe_chain, describe_schema, fitted_table

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            fitted = stages.load(path)
        except stages.ChainFileError as exc:
            assert "\n" not in str(exc)
            return
        fitted_table(fitted)
        describe_chain(str(path), fitted)
        describe_schema(fitted)
        with suppress(RemnantError):
            fitted.predict(data)


@FUZZ
@given(data=st.data())
def test_any_value_of_the_manifest_swapped_for_a_confusing_one_is_handled(tmp_path, base_bytes, base_chain,
                                                                          diabetes_rows, data):
    manifest = json.loads(members_of_bytes(base_bytes)["manifest.json"])
    path = data.draw(st.sampled_from(list(key_paths(manifest))[1:]))
    value = data.draw(CONFUSERS)
    target = tmp_path / "confused.chain"
    target.write_bytes(edited(base_bytes, path, value, data.draw(st.booleans())))
    read_everything(target, diabetes_rows)


#: fields that show and predict read, each set to a value of the wrong kind
SHOWN_FIELDS = [
    ("versions", ["numpy", "2.0"]), ("versions", {"numpy": {"major": 2}}), ("validation", "holdout 20%"),
    ("validation", {"scheme": "nonsense"}), ("rows", "many"), ("rows", {"train": -5}), ("seed", "zero"),
    ("source", ["a", "b"]), ("ignore", "patient"), ("start_scores", [1, 2]), ("start_scores", {"train": [1.0]}),
    ("threshold", 5), ("created", 12), ("test_revealed", "yes"), ("start", "145"),
    (("schema", "columns", 0, "role"), "weird"), (("schema", "columns", 10, "levels"), {"old": 1}),
    (("schema", "columns", 10, "levels"), [1, 2]), (("schema", "classes"), ["a"]),
    (("stages", 0, "scores"), {"train": "good"}), (("stages", 0, "fit_seconds"), -1),
    (("stages", 0, "spec", "shrinkage"), 7), (("stages", 1, "feature_index"), [0, 0]),
]


@pytest.mark.parametrize(("key", "value"), SHOWN_FIELDS, ids=[f"{k}={v!r}"[:40] for k, v in SHOWN_FIELDS])
def test_a_confused_field_show_and_predict_read_is_one_error_line(base_chain, tmp_path, key, value):
    members = members_of(base_chain)
    manifest = json.loads(members["manifest.json"])
    path = key if isinstance(key, tuple) else (key,)
    holder = manifest
    for part in path[:-1]:
        holder = holder[part]
    holder[path[-1]] = value
    members["manifest.json"] = json.dumps(manifest).encode()
    target = tmp_path / "confused.chain"
    write_members(target, members)
    for argv in (["show", target], ["predict", target, base_chain.parent / "data.csv"]):
        out, err = io.StringIO(), io.StringIO()
        with redirect_stdout(out), redirect_stderr(err):
            status = tui.cli.main([str(a) for a in argv])
        lines = err.getvalue().splitlines()
        assert status == 2 and len(lines) == 1 and lines[0].startswith("error: "), (argv[0], err.getvalue())
        assert out.getvalue() == ""


def test_an_unknown_manifest_key_is_refused(base_chain, tmp_path):
    members = members_of(base_chain)
    manifest = manifest_of(base_chain)
    manifest["surprise"] = 1
    members["manifest.json"] = json.dumps(manifest).encode()
    write_members(tmp_path / "c.chain", members)
    with pytest.raises(stages.ChainFileError, match="unknown key 'surprise'"):
        stages.load(tmp_path / "c.chain")
