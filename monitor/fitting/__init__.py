"""Fitting kinetics from history or lab runs: sources, candidates, the job, plots.

`fit_recipe` and `fit_lab_csv` (in `.job`) are what the CLI and the demo call;
progress reaches the caller through a `FitProgress` it passes.
"""

from .progress import FitProgress

__all__ = ["FitProgress"]
