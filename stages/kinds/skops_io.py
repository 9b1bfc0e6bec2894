"""Safe persistence of scikit-learn objects through skops: exact classes only, checked before anything is built.

A skops file is a zip archive: ``schema.json`` describes a tree of nodes (each names a loader,
a module and a class) and the arrays sit beside it in numpy's own format. skops builds a
node's object by importing what the node names and calling it, so trusting a type means
trusting a callable. Here:

* ``dump`` writes the object and returns the exact types its file holds; a type outside the
  allowed list is refused at once, so a file that could not be loaded is never written.
* ``load`` reads the archive within bounds (``stages.container``), walks ``schema.json`` itself
  and refuses, before any node is created: a loader that returns or calls a function
  (``FunctionNode``, ``PartialNode``, ``MethodNode``, ``OperatorFuncNode``,
  ``ConstructorFromReduceNode``, ...), any type not in the allowed list, any type the file's
  own record (made when it was saved) does not list, and a tree whose declared shape does not
  fit the stage. Only then does skops build the object, trusting exactly the types found.

The allowed lists name exact classes; no module prefix is ever trusted.
"""

from __future__ import annotations

import io
import json
import zipfile
from collections.abc import Iterable
from typing import Any

from .. import limits
from ..container import ArchiveReader
from ..errors import ChainFileError

#: the loaders whose nodes build data or an object of a named, allowed class; any other is refused
SAFE_LOADERS = frozenset({
    "ObjectNode", "DictNode", "DefaultDictNode", "ListNode", "TupleNode", "SetNode", "JsonNode", "NdArrayNode",
    "DTypeNode", "TreeNode", "LossNode", "RandomStateNode", "SliceNode", "TypeNode", "BytesNode",
    "BytearrayNode", "SparseMatrixNode",
})

#: plain data every artifact may hold
DATA_TYPES: tuple[str, ...] = (
    "builtins.dict", "builtins.list", "builtins.tuple", "builtins.set", "builtins.str", "builtins.int",
    "builtins.float", "builtins.bool", "builtins.NoneType", "builtins.slice", "builtins.bytes",
    "numpy.ndarray", "numpy.dtype",
    "numpy.float64", "numpy.float32", "numpy.float16", "numpy.int64", "numpy.int32", "numpy.int16", "numpy.int8",
    "numpy.uint64", "numpy.uint32", "numpy.uint16", "numpy.uint8", "numpy.bool_", "numpy.bool", "numpy.str_",
    "numpy.intp", "numpy.uintp", "numpy.longlong", "numpy.ulonglong",
    "numpy.random.RandomState", "numpy.random.mtrand.RandomState", "numpy.random._mt19937.MT19937",
)

#: what the built-in tree kinds' artifacts hold besides plain data
TREE_TYPES: tuple[str, ...] = (
    "sklearn.tree._classes.DecisionTreeRegressor",
    "sklearn.tree._tree.Tree",
    "sklearn.ensemble._forest.RandomForestRegressor",
    "sklearn.ensemble._forest.ExtraTreesRegressor",
    "sklearn.tree._classes.ExtraTreeRegressor",
)

#: kept for callers that name the old list: every type a built-in kind's artifact may contain
TRUSTED_TYPES: tuple[str, ...] = TREE_TYPES + DATA_TYPES

_MAX_SCHEMA_BYTES = 64 * 1024**2
_MAX_DEPTH = 200


def dump(obj: Any, allowed: Iterable[str] | None = None) -> tuple[bytes, list[str]]:
    """Return ``obj`` serialised by skops and the sorted exact types the file holds.

    Raise ChainFileError when it holds a type outside ``allowed`` (default TRUSTED_TYPES) or a
    loader that would run a function on load: such a file could never be loaded safely.
    """
    import skops.io as sio

    payload = sio.dumps(obj)
    with zipfile.ZipFile(io.BytesIO(payload)) as archive:
        schema = json.loads(archive.read("schema.json"))
    types = sorted(_schema_types(schema, "the stage", n_outputs=None))
    allowed_set = set(TRUSTED_TYPES if allowed is None else allowed)
    outside = [t for t in types if t not in allowed_set]
    if outside:
        raise ChainFileError(f"it holds {outside[0]}, a type remnant does not load from a file")
    return payload, types


def load(payload: bytes, allowed: Iterable[str] | None = None, expected: tuple[type, ...] = (),
         recorded: Any = None, n_features: int | None = None, n_outputs: int = 1) -> Any:
    """Return the object in a skops ``payload``; raise ChainFileError for anything not trusted.

    ``allowed`` is the exact list of types the artifact may hold (default TRUSTED_TYPES);
    ``recorded`` the list the artifact's meta says it was saved with (None for files written
    before types were recorded); ``expected`` the classes the top-level object may be;
    ``n_features`` the widest input a tree in it may split on.
    """
    import skops.io as sio

    allowed_set = set(TRUSTED_TYPES if allowed is None else allowed)
    if recorded is not None:
        if not isinstance(recorded, list) or not all(isinstance(t, str) for t in recorded):
            raise ChainFileError("stage artifact has no valid list of the types it holds")
        outside = sorted(set(recorded) - allowed_set)
        if outside:
            raise ChainFileError(f"stage artifact says it holds {outside[0][:200]}, a type that is not trusted")
        allowed_set &= set(recorded)
    clean, schema = _read_archive(payload)
    found = _schema_types(schema, "stage artifact", n_features, n_outputs)
    refused = sorted(found - allowed_set)
    if refused:
        listed = "" if recorded is None or refused[0] not in recorded else " (not allowed for this kind)"
        raise ChainFileError(f"stage artifact holds a type that is not trusted: {refused[0][:200]}{listed}")
    try:
        obj = sio.loads(clean, trusted=sorted(found))
    except Exception as exc:  # skops and the classes it builds raise many kinds on damaged data
        raise ChainFileError(f"stage artifact could not be loaded ({type(exc).__name__}: {_one_line(exc)})") from None
    if expected and type(obj) not in expected:
        names = ", ".join(cls.__name__ for cls in expected)
        raise ChainFileError(f"stage artifact holds a {type(obj).__name__}, expected {names}")
    return obj


def _read_archive(payload: bytes) -> tuple[bytes, dict[str, Any]]:
    """Return a clean copy of the skops archive (stored members, read within bounds) and its schema."""
    with ArchiveReader.from_bytes(payload, "stage artifact", ChainFileError, what="skops file") as archive:
        if not archive.has("schema.json"):
            raise ChainFileError("stage artifact is not a readable skops file (no schema.json)")
        members = {name: archive.read(name, limit=_MAX_SCHEMA_BYTES if name == "schema.json" else
                                      limits.MAX_MEMBER_BYTES) for name in archive.names()}
    try:
        schema = json.loads(members["schema.json"])
    except (ValueError, RecursionError) as exc:
        raise ChainFileError(f"stage artifact is not a readable skops file ({_one_line(exc)})") from None
    if not isinstance(schema, dict):
        raise ChainFileError("stage artifact is not a readable skops file (its schema is not an object)")
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_STORED) as clean:
        for name, data in members.items():
            clean.writestr(name, data)
    return buffer.getvalue(), schema


def _schema_types(schema: dict[str, Any], where: str, n_features: int | None = None,
                  n_outputs: int | None = 1) -> set[str]:
    """Return every ``module.class`` the schema's nodes name; raise ChainFileError for an unsafe node."""
    found: set[str] = set()
    stack: list[tuple[Any, int]] = [(schema, 0)]
    while stack:
        value, depth = stack.pop()
        if depth > _MAX_DEPTH:
            raise ChainFileError(f"{where} is nested more than {_MAX_DEPTH} deep")
        if isinstance(value, list):
            stack.extend((item, depth + 1) for item in value)
            continue
        if not isinstance(value, dict):
            continue
        if "__loader__" in value:
            found.add(_node_type(value, where))
            if value["__loader__"] == "TreeNode":
                _check_tree_node(value, where, n_features, n_outputs)
        stack.extend((item, depth + 1) for item in value.values() if isinstance(item, dict | list))
    return found


def _node_type(node: dict[str, Any], where: str) -> str:
    loader, module, name = node.get("__loader__"), node.get("__module__"), node.get("__class__")
    if not all(isinstance(part, str) and 0 < len(part) <= 200 for part in (loader, module, name)):
        raise ChainFileError(f"{where} has a node without a valid loader, module and class")
    if loader not in SAFE_LOADERS:
        raise ChainFileError(f"{where} holds {module}.{name} through skops's {loader}, which remnant never "
                             "loads from a file (it calls or returns a function): the type is not trusted")
    return f"{module}.{name}"


def _check_tree_node(node: dict[str, Any], where: str, n_features: int | None, n_outputs: int | None = 1) -> None:
    """Refuse a scikit-learn tree whose constructor arguments do not fit a regression tree of ``n_outputs`` outputs."""
    try:
        args = node["__reduce__"]["args"]["content"]
        width = json.loads(args[0]["content"])
        outputs = json.loads(args[2]["content"])
    except (KeyError, TypeError, IndexError, ValueError):
        raise ChainFileError(f"{where} holds a tree whose shape cannot be read") from None
    if not isinstance(width, int) or isinstance(width, bool) or width < 1:
        raise ChainFileError(f"{where} holds a tree over {width!r} features")
    if n_features is not None and width > n_features:
        raise ChainFileError(f"{where} holds a tree over {width:,} features; the stage has {n_features:,}")
    if n_outputs is not None and outputs != n_outputs:
        raise ChainFileError(f"{where} holds a tree with {outputs!r} outputs; this stage's trees have {n_outputs}")


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:300] or type(exc).__name__
