"""remnant's engine: residual chains over tabular data, their validation, scoring and saving.

The Python facade::

    import stages
    chain = stages.Chain.from_file("deliveries.csv", target="minutes_late",
                                   validation=stages.Holdout(fraction=0.2, seed=0))
    chain.add("linear")
    chain.add("lightgbm", shrinkage=0.5, params={"num_leaves": 15})
    chain.table()
    chain.save("deliveries.chain")
    fitted = stages.load("deliveries.chain")
"""

from __future__ import annotations

import os

# OpenMP's waiting threads (LightGBM's, scikit-learn's) spin by default; on a machine where another
# process holds a core, spinning threads stall one another and a LightGBM fit takes many times as
# long. Sleeping waits cost nothing measurable on an idle machine. The variable is read once, when
# the first OpenMP runtime starts, so it is set before anything here imports LightGBM or
# scikit-learn; a user's own setting wins.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

import logging
from typing import Any

from .chain import Chain
from .errors import (
    Cancelled,
    ChainFileError,
    ChainStateError,
    DataError,
    FitCancelled,
    RecipeError,
    RemnantError,
    SchemaError,
    StageFitError,
    StageSpecError,
    ValidationSpecError,
)
from .predictor import FittedChain
from .spec import StageSpec
from .validation import AllRows, GroupHoldout, Holdout, KFold, SplitColumn, TimeOrder

__version__ = "0.1.0"

# every logger of the engine is under "remnant" (remnant.stages.<module>); the program using the
# engine decides where the records go
logging.getLogger("remnant").addHandler(logging.NullHandler())

_LAZY = {
    "load": ("files.store", "load"),
    "sign": ("files.signing", "sign"),
    "verify": ("files.signing", "verify"),
    "ChainRegressor": ("bridges.estimator", "ChainRegressor"),
    "ChainClassifier": ("bridges.estimator", "ChainClassifier"),
    "read_recipe": ("files.recipe", "read_recipe"),
    "fit_recipe": ("files.recipe", "fit_recipe"),
}


def __getattr__(name: str) -> Any:
    """Return the heavier parts of the facade (saving, recipes, estimators) on first use."""
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        return getattr(importlib.import_module(f".{module}", __name__), attr)
    raise AttributeError(f"module 'stages' has no attribute {name!r}")


__all__ = [
    "Chain", "FittedChain", "StageSpec", "Holdout", "KFold", "TimeOrder", "GroupHoldout", "SplitColumn",
    "AllRows",
    "RemnantError", "DataError", "ValidationSpecError", "StageSpecError", "ChainStateError", "StageFitError", "Cancelled",
    "FitCancelled", "RecipeError", "ChainFileError", "SchemaError", "load", "sign", "verify", "ChainRegressor",
    "ChainClassifier",
    "read_recipe", "fit_recipe", "__version__",
]
