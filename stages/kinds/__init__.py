"""The registry of stage kinds. A new kind is one small module that calls ``register``."""

from __future__ import annotations

import importlib

from ..errors import StageSpecError
from .base import Artifact, FitRequest, StageKind

_REGISTRY: dict[str, StageKind] = {}
_BUILTIN_MODULES = (
    "mean", "linear", "logistic", "glm", "tree", "forest", "lightgbm_stage", "hist_tree", "knn", "spline",
)
_loaded = False

#: prefix of the kind that wraps any scikit-learn regressor by import path
SKLEARN_PREFIX = "sklearn:"


def register(kind: StageKind) -> StageKind:
    """Add ``kind`` to the registry under its name and return it."""
    _REGISTRY[kind.name] = kind
    return kind


def _load_builtins() -> None:
    global _loaded
    if _loaded:
        return
    for module in _BUILTIN_MODULES:
        importlib.import_module(f"{__name__}.{module}")
    _loaded = True


def get_kind(name: str) -> StageKind:
    """Return the kind called ``name`` (``sklearn:<module>.<Class>`` builds one on demand)."""
    _load_builtins()
    if name in _REGISTRY:
        return _REGISTRY[name]
    if name.startswith(SKLEARN_PREFIX):
        from .sklearn_any import SklearnKind

        return SklearnKind.for_path(name[len(SKLEARN_PREFIX):])
    raise StageSpecError(
        f"unknown stage kind {name!r} (choose one of: {', '.join(kind_names())}, or sklearn:<module>.<Class>)"
    )


def kind_names() -> list[str]:
    """Return the names of the built-in kinds, in the order a user meets them."""
    _load_builtins()
    return list(_REGISTRY)


__all__ = ["Artifact", "FitRequest", "StageKind", "get_kind", "kind_names", "register", "SKLEARN_PREFIX"]
