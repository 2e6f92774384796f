"""The estimator's settings."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class EstimatorSettings:
    """The estimator's settings (the ``[estimator]`` table of the configuration)."""

    max_gap_s: float = 300.0
    monte_carlo_draws: int = 1000
    seed: int = 20261201
    mismatch_sigma: float = 4.0
    horizon_h: float = 72.0
