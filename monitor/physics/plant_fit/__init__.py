"""The joint fit of kinetics to many plant batches, each along its own trace.

Modules: `problem` (the series and the Θ quadrature nodes), `model` (residuals and
the analytic Jacobian), `fit` (the driver `fit_batches`, as named steps), `result`
(`PlantFit`, covariance, standard errors) and `diagnostics` (typed warnings and the
parameters held fixed).
"""

from .diagnostics import FitWarning, FixedParameter, FixedSource, WarningKind, of_kind
from .fit import fit_batches
from .problem import FitSeries
from .result import PlantFit, excluded_mask, ln_k_band

__all__ = [
    "FitSeries",
    "FitWarning",
    "FixedParameter",
    "FixedSource",
    "PlantFit",
    "WarningKind",
    "excluded_mask",
    "fit_batches",
    "ln_k_band",
    "of_kind",
]
