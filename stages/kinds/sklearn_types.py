"""Which scikit-learn classes an ``sklearn:<module>.<Class>`` stage may name, and what its file may hold.

A stage names its regressor by path; the path is accepted only when it names, exactly, one of
the regressors scikit-learn itself lists (``sklearn.utils.all_estimators``), looked up among
them, never imported from the path. Its skops artifact may hold that class and the exact types
below: plain data, the estimators some regressors fit inside themselves, and the losses, links,
kernels and optimisers their fitted attributes keep. Nothing is trusted by module prefix, no
function ever, and no type whose native structure remnant cannot check on load. Two classes
get more, each under its own rule:

* ``HistGradientBoostingRegressor`` may hold its predictors (``TreePredictor``) and bin mapper,
  whose node records ``tree_structure.check_hist_predictors`` checks before any prediction; the
  random generator it keeps for fitting only is left out of the file (``FIT_ONLY``);
* the neighbour regressors (``KNeighborsRegressor``, ``RadiusNeighborsRegressor``) are saved
  without their search tree (``FIT_ONLY``): on load the tree is built again from the stored rows
  by scikit-learn itself (``REBUILT_ON_LOAD``), so no stored tree is ever walked.
"""

from __future__ import annotations

import functools
import sys

from .skops_io import DATA_TYPES

_LOSSES = ("HalfSquaredError", "AbsoluteError", "HuberLoss", "PinballLoss", "HalfPoissonLoss", "HalfGammaLoss",
           "HalfTweedieLoss", "HalfTweedieLossIdentity")
_KERNELS = ("CompoundKernel", "ConstantKernel", "DotProduct", "ExpSineSquared", "Exponentiation", "Matern",
            "PairwiseKernel", "Product", "RBF", "RationalQuadratic", "Sum", "WhiteKernel")

#: the exact types a scikit-learn regressor's fitted attributes may need, besides its own class
FITTED_TYPES: tuple[str, ...] = (
    *DATA_TYPES,
    # estimators some regressors fit inside themselves (boosting, bagging, RANSAC, target transforms)
    "sklearn.tree._classes.DecisionTreeRegressor", "sklearn.tree._classes.ExtraTreeRegressor", "sklearn.tree._tree.Tree",
    "sklearn.dummy.DummyRegressor", "sklearn.linear_model._base.LinearRegression",
    "sklearn.preprocessing._function_transformer.FunctionTransformer",
    # losses and links of gradient boosting and the GLMs
    *(f"sklearn._loss.loss.{name}" for name in _LOSSES),
    *(f"sklearn._loss._loss.Cy{name}" for name in _LOSSES),
    "sklearn._loss.link.IdentityLink", "sklearn._loss.link.LogLink", "sklearn._loss.link.Interval",
    # Gaussian-process kernels and the neural network's optimisers
    *(f"sklearn.gaussian_process.kernels.{name}" for name in _KERNELS),
    "sklearn.neural_network._stochastic_optimizers.AdamOptimizer",
    "sklearn.neural_network._stochastic_optimizers.SGDOptimizer",
)


_HIST = "sklearn.ensemble._hist_gradient_boosting.gradient_boosting.HistGradientBoostingRegressor"
_NEIGHBOURS = ("sklearn.neighbors._regression.KNeighborsRegressor", "sklearn.neighbors._regression.RadiusNeighborsRegressor")

#: types one class may hold besides FITTED_TYPES
CLASS_TYPES: dict[str, tuple[str, ...]] = {
    _HIST: ("sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
            "sklearn.ensemble._hist_gradient_boosting.binning._BinMapper"),
}
#: fitted attributes only a fit uses, left out of a class's file (set to None in the copy saved)
FIT_ONLY: dict[str, tuple[str, ...]] = {_HIST: ("_feature_subsample_rng",), **{n: ("_tree",) for n in _NEIGHBOURS}}
#: classes whose fit is done again on load from their stored rows, by scikit-learn (cheap and deterministic)
REBUILT_ON_LOAD: frozenset[str] = frozenset(_NEIGHBOURS)


def class_path(cls: type) -> str:
    """Return ``module.qualname`` of ``cls``, as skops names types."""
    return f"{cls.__module__}.{cls.__qualname__}"


@functools.cache
def listed_regressors() -> dict[str, type]:
    """Return scikit-learn's own list of regressors, by their defining module path and class name."""
    from sklearn.utils import all_estimators

    return {f"{cls.__module__}.{cls.__qualname__}": cls for _, cls in all_estimators(type_filter="regressor")}


def listed_regressor(path: str) -> type | None:
    """Return the regressor ``path`` names (its defining module's path or a package exporting it), else None.

    Nothing is imported for ``path``: the lookup is among the regressors scikit-learn lists,
    whose modules its listing has already imported.
    """
    regressors = listed_regressors()
    if path in regressors:
        return regressors[path]
    module_name, _, class_name = path.rpartition(".")
    module = sys.modules.get(module_name)
    found = getattr(module, class_name, None) if module is not None else None
    return found if isinstance(found, type) and found in regressors.values() else None


def allowed_types(cls: type) -> tuple[str, ...]:
    """Return the exact types an artifact of a stage of regressor ``cls`` may hold."""
    path = class_path(cls)
    return (path, *FITTED_TYPES, *CLASS_TYPES.get(path, ()))
