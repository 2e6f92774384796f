"""Posterior of a batch's activity factor from its assays.

``ln alpha`` has a Student-t prior (``PRIOR_DOF`` degrees of freedom) centred
on 0 with scale ``s`` (the spread seen in history, plus the uncertainty of
``ln k_ref``, with which ``alpha`` is confounded). The heavy tails are the
usual robust choice for a hierarchical prior (Gelman, "Prior distributions for
variance parameters in hierarchical models", Bayesian Analysis 1 (2006)
515-534): a batch far from the fleet (a drifting catalyst, a bad charge) is
followed by its own assays instead of being held near the fleet. Each assay
``y_i = f_i(alpha) + e_i`` with ``e_i ~ N(0, sd^2)``. The posterior is evaluated
on a grid of ``ln alpha`` (exact for any model shape, no optimiser to fail), first
wide, then refined around its mode.

An assay whose leave-one-out predictive residual exceeds ``mismatch_sigma``
standard deviations is an *assay-mismatch* finding: reported, and left out of
the posterior (one at a time, worst first), never silently dropped.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np


@dataclass
class ActivityPosterior:
    """Grid posterior of ``phi = ln alpha``; ``weights`` sum to one."""

    phi: np.ndarray
    weights: np.ndarray
    used: np.ndarray  # bool per assay
    z_loo: np.ndarray  # leave-one-out standardised residual per assay
    fisher: np.ndarray = field(default_factory=lambda: np.empty(0))  # information per assay

    @property
    def mean_phi(self) -> float:
        return float(self.weights @ self.phi)

    @property
    def alpha_mean(self) -> float:
        return float(self.weights @ np.exp(self.phi))

    @property
    def alpha_sd(self) -> float:
        a = np.exp(self.phi)
        return float(np.sqrt(max(self.weights @ a**2 - (self.weights @ a) ** 2, 0.0)))

    def sample(self, u: np.ndarray) -> np.ndarray:
        """``phi`` at uniform variates ``u`` by the inverse CDF (linear within cells)."""
        cdf = np.cumsum(self.weights)
        cdf = np.concatenate([[0.0], cdf / cdf[-1]])
        step = self.phi[1] - self.phi[0] if len(self.phi) > 1 else 0.0
        edges = np.concatenate([[self.phi[0] - step / 2], self.phi + step / 2])
        return np.interp(u, cdf, edges)


PRIOR_DOF = 4.0


def log_prior(phi: np.ndarray, prior_sd: float) -> np.ndarray:
    """Student-t log density of ``ln alpha`` up to a constant [-]."""
    return -0.5 * (PRIOR_DOF + 1.0) * np.log1p((phi / prior_sd) ** 2 / PRIOR_DOF)


def _log_weights(loglik: np.ndarray, phi: np.ndarray, prior_sd: float) -> np.ndarray:
    lw = loglik + log_prior(phi, prior_sd)
    return lw - lw.max()


def activity_posterior(
    predict: Callable[[np.ndarray], np.ndarray],
    y: np.ndarray,
    sd: float,
    prior_sd: float,
    *,
    mismatch_sigma: float = 4.0,
    n_grid: int = 1201,
    n_fine: int = 241,
) -> ActivityPosterior:
    """Grid posterior of ``ln alpha``.

    Parameters
    ----------
    predict : callable
        ``predict(phi)`` with ``phi`` of shape (m,) returns predicted assays of shape
        (m, n) in assay units.
    y : numpy.ndarray
        Observed assays, shape (n,).
    sd : float
        One-sigma assay error, in assay units.
    prior_sd : float
        Prior standard deviation of ``ln alpha`` [-].
    mismatch_sigma : float
        Leave-one-out residual (in predictive sd) beyond which an assay is a mismatch.
    """
    y = np.asarray(y, dtype=float)
    n = len(y)
    half_width = max(12.0 * prior_sd, 1.5)  # the t prior's tails: alpha from 0.22 to 4.5
    phi = np.linspace(-half_width, half_width, n_grid)
    used = np.ones(n, dtype=bool)
    z = np.zeros(n)
    if n == 0:
        w = np.exp(_log_weights(np.zeros_like(phi), phi, prior_sd))
        return ActivityPosterior(phi, w / w.sum(), used, z)
    pred = predict(phi)  # (m, n)
    ll_each = -0.5 * ((y[None, :] - pred) / sd) ** 2
    while True:
        ll = ll_each[:, used].sum(axis=1)
        z = np.zeros(n)
        for i in range(n):
            # leave-one-out predictive of assay i: posterior without i, plus assay noise
            lw = _log_weights(ll - (ll_each[:, i] if used[i] else 0.0), phi, prior_sd)
            w = np.exp(lw)
            w /= w.sum()
            m = w @ pred[:, i]
            v = w @ (pred[:, i] - m) ** 2 + sd**2
            z[i] = (y[i] - m) / np.sqrt(v)
        worst = np.argmax(np.where(used, np.abs(z), -1.0))
        if used.sum() > 0 and abs(z[worst]) > mismatch_sigma:
            used[worst] = False
            continue
        break
    # refine around the mode
    ll = ll_each[:, used].sum(axis=1)
    w = np.exp(_log_weights(ll, phi, prior_sd))
    w /= w.sum()
    mean = w @ phi
    spread = max(np.sqrt(w @ (phi - mean) ** 2), (phi[1] - phi[0]) * 2)
    fine = np.linspace(mean - 8 * spread, mean + 8 * spread, n_fine)
    pred_f = predict(fine)
    llf = (-0.5 * ((y[None, used] - pred_f[:, used]) / sd) ** 2).sum(axis=1)
    wf = np.exp(_log_weights(llf, fine, prior_sd))
    wf /= wf.sum()
    # information each assay carries about phi (for anchoring the forecast)
    dphi = fine[1] - fine[0]
    slope = np.gradient(pred_f, dphi, axis=0)
    fisher = (wf @ slope**2) / sd**2
    fisher[~used] = 0.0
    return ActivityPosterior(fine, wf, used, z, fisher)
