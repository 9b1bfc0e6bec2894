"""Safe persistence of scikit-learn objects through skops, with an explicit list of trusted types."""

from __future__ import annotations

from typing import Any

from ..errors import ChainFileError

#: every type a built-in kind's artifact may contain; anything else is refused on load
TRUSTED_TYPES: tuple[str, ...] = (
    "sklearn.tree._classes.DecisionTreeRegressor",
    "sklearn.tree._tree.Tree",
    "sklearn.ensemble._forest.RandomForestRegressor",
    "sklearn.ensemble._forest.ExtraTreesRegressor",
    "sklearn.tree._classes.ExtraTreeRegressor",
    "numpy.random.RandomState",
    "numpy.random._mt19937.MT19937",
    "builtins.slice",
)


def dump(obj: Any) -> bytes:
    """Return ``obj`` serialised by skops."""
    import skops.io as sio

    return sio.dumps(obj)


def load(payload: bytes, extra_trusted: tuple[str, ...] = ()) -> Any:
    """Return the object in ``payload``; raise ChainFileError when it holds a type not trusted."""
    import skops.io as sio

    trusted = set(TRUSTED_TYPES) | set(extra_trusted)
    try:
        found = sio.get_untrusted_types(data=payload)
    except Exception as exc:  # skops raises several kinds on damaged data
        raise ChainFileError(f"stage artifact is not a readable skops file ({exc})") from None
    refused = sorted(set(found) - trusted)
    if refused:
        raise ChainFileError(f"stage artifact holds a type that is not trusted: {refused[0]}")
    try:
        return sio.loads(payload, trusted=sorted(set(found)))
    except Exception as exc:
        raise ChainFileError(f"stage artifact could not be loaded ({exc})") from None
