"""The joint fit of kinetics to many plant batches, each along its own trace."""

from .fit import FitSeries, PlantFit, excluded_mask, fit_batches

__all__ = ["FitSeries", "PlantFit", "excluded_mask", "fit_batches"]
