"""The chain's questions and decisions that work over its public state: keep an auditioned
candidate, grow, the reference models (``stages.decide``), and the residual scan, partial
dependence, coefficients, curves, largest residuals and calibration (``stages.understand``).

Each method is a door to the module that answers it, imported when first asked, so ``import
stages`` stays light; ``Chain`` takes them from ``ChainQuestions`` (a chain on a cluster
overrides the ones it cannot serve).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, cast

import pandas as pd

from .validation import Part

if TYPE_CHECKING:
    from .chain import Chain
    from .fitting import Stage


class ChainQuestions:
    """The deciding and understanding methods of ``Chain``: each returns what its module returns."""

    def _chain(self) -> Chain:
        """Return this object as the ``Chain`` it is part of (the modules answering take a chain)."""
        return cast("Chain", self)

    def keep(self, candidate: Any) -> Stage:
        """Commit an auditioned candidate as the next stage with no refit, and return its stage."""
        from .decide.audition import keep

        return keep(self._chain(), candidate)

    def grow(self, kind: str, shrinkage: float = 0.1, **options: Any) -> Any:
        """Append stages of ``kind`` until validation stops improving, trim to the best; return a GrowResult."""
        from .decide.grow import grow

        return grow(self._chain(), kind, shrinkage, **options)

    def references(self, **options: Any) -> pd.DataFrame:
        """Return the reference models' scores on this chain's split (see stages.decide.references; the
        options include ``cancel`` and ``progress``)."""
        from .decide.references import reference_scores

        return reference_scores(self._chain(), **options)

    # ----- understanding the chain: stages.understand -----------------------------------------
    def residual_scan(self, upto: int | None = None, part: Part = "valid", **options: Any) -> pd.DataFrame:
        """Return one row per feature, best first: the residual signal left in it (``score``, scored on
        rows the scan did not fit on), its noise band and its binned residuals (see stages.understand.scan)."""
        from .understand import residual_scan

        return residual_scan(self._chain(), upto, part, **options)

    def binned_residuals(self, feature: str, upto: int | None = None, part: Part = "valid",
                         **options: Any) -> pd.DataFrame:
        """Return the residuals of ``part`` in the scan's bins of ``feature``: one row per bin."""
        from .understand import binned_residuals

        return binned_residuals(self._chain(), feature, upto, part, **options)

    def partial_dependence(self, feature: str | list[str], upto: int | None = None, stage: int | None = None,
                           grid: Any = None, part: Part = "train", sample: int | None = None,
                           **options: Any) -> pd.DataFrame:
        """Return the average prediction (``average``) with ``feature`` set to each grid value, and the
        spread of the individual curves (see stages.understand.dependence)."""
        from .understand import partial_dependence

        return partial_dependence(self._chain(), feature, upto, stage, grid, part, sample, **options)

    def coefficients(self, stage: int, **options: Any) -> pd.DataFrame:
        """Return one row per term of a linear, ridge, lasso or logistic stage on the features' own
        scale, with standard errors and 95 % intervals for unpenalised ones (see stages.understand.coefficients)."""
        from .understand import coefficients

        return coefficients(self._chain(), stage, **options)

    def curves(self, stage: int, **options: Any) -> pd.DataFrame:
        """Return a spline stage's fitted curve of each feature on a grid (see stages.understand.curves)."""
        from .understand import spline_curves

        return spline_curves(self._chain(), stage, **options)

    def largest_residuals(self, n: int = 20, part: Part = "valid", upto: int | None = None,
                          **options: Any) -> pd.DataFrame:
        """Return the ``n`` rows of ``part`` with the largest absolute residual, with the residual after each stage."""
        from .understand import largest_residuals

        return largest_residuals(self._chain(), n, part, upto, **options)

    def calibration(self, part: Part = "valid", bins: int = 10, **options: Any) -> pd.DataFrame:
        """Return predicted probability in bins against the observed rate, with counts (binary chains)."""
        from .understand import calibration

        return calibration(self._chain(), part, bins, **options)
