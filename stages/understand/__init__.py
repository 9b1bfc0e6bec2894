"""Understanding a chain: where the error still lives and what each stage learned.

This is the second floor, above the core, and imports only the core. Every function here
reads only a chain's public state (its stages, their learners and specs, the layout of its
parts, its outputs per row, the schema and the feature matrix) and returns pandas DataFrames; nothing here changes a chain.

- ``scan``: the residual scan (features ranked by the residual signal left in them, scored on
  rows the scan did not fit on) and the binned residuals against one feature;
- ``dependence``: partial dependence (one feature or two) and individual curves;
- ``coefficient_table``: coefficients of linear, ridge, lasso and logistic stages on the features'
  own scale, with standard errors for the unpenalised ones;
- ``curves``: the fitted curves of spline stages;
- ``largest``: the rows with the largest residuals;
- ``calibration_bins``: predicted probability in bins against the observed rate;
- ``importance``: the feature importance of one stage.

Results are cached per chain state (``cache``), so a view that asks again after the chain
changed gets a fresh answer and one that asks twice does not recompute.
"""

from __future__ import annotations

from .calibration_bins import calibration, calibration_table, fitted_calibration
from .coefficient_table import coefficients, fitted_coefficients
from .curves import fitted_curves, spline_curves
from .dependence import fitted_partial_dependence, individual_curves, partial_dependence
from .largest import fitted_largest_residuals, largest_residuals
from .scan import binned_residuals, residual_scan

__all__ = [
    "binned_residuals", "calibration", "calibration_table", "fitted_calibration", "coefficients", "fitted_coefficients",
    "fitted_curves", "fitted_largest_residuals", "fitted_partial_dependence", "individual_curves",
    "largest_residuals", "partial_dependence", "residual_scan", "spline_curves",
]
