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


def load(payload: bytes, extra_trusted: tuple[str, ...] = (), expected: tuple[type, ...] = ()) -> Any:
    """Return the object in ``payload``; raise ChainFileError when it holds a type not trusted.

    skops trusts scikit-learn's own estimators by default, so ``expected`` names the classes
    the top-level object may be; any other estimator is refused after loading (loading a
    trusted scikit-learn type runs no code from the file).
    """
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
        obj = sio.loads(payload, trusted=sorted(set(found)))
    except Exception as exc:
        raise ChainFileError(f"stage artifact could not be loaded ({exc})") from None
    if expected and type(obj) not in expected:
        names = ", ".join(cls.__name__ for cls in expected)
        raise ChainFileError(f"stage artifact holds a {type(obj).__name__}, expected {names}")
    return obj
