"""Control charts for one figure per batch: individuals, EWMA and CUSUM.

Everything here is dimensionless or in the unit of the figure being charted
(activity, time to target, final conversion, ...); a chart only needs the
series ``x`` and, for judging new batches, a centre and a sigma taken from a
separate baseline (never from the batches being judged). Standardised values
``z = (x - centre) / sigma`` are in units of that sigma. The Western Electric
run rules are in `monitor.physics.run_rules`.

References
----------
Montgomery, D. C., Introduction to Statistical Quality Control, 7th ed., Wiley
(2013): ch. 6.4 (individuals and moving range), 9.1 (tabular CUSUM, fast
initial response, the last-zero estimate of the change), 9.2 (EWMA); section
numbers from memory.
Lucas, J. M. & Crosier, R. B., "Fast initial response for CUSUM
quality-control schemes", Technometrics 24 (1982) 199-205.
Lucas, J. M. & Saccucci, M. S., "Exponentially weighted moving average control
schemes: properties and enhancements", Technometrics 32 (1990) 1-12.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy.signal import lfilter

#: d2 for moving ranges of two consecutive points: E|X1 - X2| / sigma = 2/sqrt(pi) [-].
D2_MOVING_RANGE_2 = 2.0 / math.sqrt(math.pi)


def as_series(x, minimum: int = 1) -> np.ndarray:
    """A 1-D array of finite floats with at least ``minimum`` points, else ValueError."""
    arr = np.asarray(x, dtype=float)
    if arr.ndim != 1:
        raise ValueError(f"expected a 1-D series, got shape {arr.shape}")
    if arr.size < minimum:
        raise ValueError(f"need at least {minimum} points, got {arr.size}")
    if not np.all(np.isfinite(arr)):
        raise ValueError("the series contains NaN or infinite values")
    return arr


def check_sigma(sigma: float) -> float:
    """A finite, positive sigma, else ValueError."""
    sigma = float(sigma)
    if not (math.isfinite(sigma) and sigma > 0.0):
        raise ValueError(f"sigma must be finite and positive, got {sigma}")
    return sigma


def moving_range_sigma(x) -> float:
    """Process sigma from the average moving range of two, ``MR-bar / d2``.

    Parameters
    ----------
    x : array_like
        The series in time order, at least two points [unit of the figure].

    Returns
    -------
    float
        ``mean(|x[i] - x[i-1]|) / d2`` with ``d2 = 2/sqrt(pi) = 1.128`` [unit of the figure].

    Notes
    -----
    For independent normal points ``E|X1 - X2| = 2 sigma / sqrt(pi)``, so the
    estimate is unbiased for the short-term sigma and, unlike the overall
    standard deviation, is not inflated by a slow drift (Montgomery 2013, 6.4).

    Examples
    --------
    >>> round(moving_range_sigma([10.0, 12.0, 11.0, 13.0]), 4)
    1.477
    """
    arr = as_series(x, minimum=2)
    return float(np.mean(np.abs(np.diff(arr))) / D2_MOVING_RANGE_2)


class Baseline(NamedTuple):
    """Centre and sigma taken from a baseline period."""

    centre: float
    sigma: float
    n: int


def baseline_from(x) -> Baseline:
    """Centre (mean) and moving-range sigma of a baseline series.

    Examples
    --------
    >>> b = baseline_from([10.0, 12.0, 11.0, 13.0])
    >>> b.centre, round(b.sigma, 4), b.n
    (11.5, 1.477, 4)
    """
    arr = as_series(x, minimum=2)
    sigma = moving_range_sigma(arr)
    check_sigma(sigma)
    return Baseline(float(arr.mean()), sigma, int(arr.size))


def standardise(x, centre: float, sigma: float) -> np.ndarray:
    """``(x - centre) / sigma`` after checking the inputs."""
    return (as_series(x) - float(centre)) / check_sigma(sigma)


class IndividualsChart(NamedTuple):
    """An individuals (X) chart: limits, standardised points and which are beyond."""

    centre: float
    sigma: float
    lcl: float
    ucl: float
    z: np.ndarray
    beyond: np.ndarray


def individuals_chart(x, centre=None, sigma=None, L: float = 3.0) -> IndividualsChart:
    """Shewhart individuals chart with limits ``centre +/- L sigma``.

    Parameters
    ----------
    x : array_like
        The figures to judge, in time order [unit of the figure].
    centre, sigma : float, optional
        From a separate baseline (see `baseline_from`). When omitted they are
        estimated from ``x`` itself (a phase I look at history) [unit of the figure].
    L : float
        Width of the limits in sigmas [-].

    Returns
    -------
    IndividualsChart
        ``beyond[i]`` is True where ``|x[i] - centre| > L sigma``.

    Examples
    --------
    >>> c = individuals_chart([10.2, 9.9, 13.8], centre=10.0, sigma=1.0)
    >>> c.ucl, c.beyond.tolist()
    (13.0, [False, False, True])
    """
    arr = as_series(x)
    if (centre is None) != (sigma is None):
        raise ValueError("give both centre and sigma (from a baseline), or neither")
    if centre is None:
        centre, sigma, _ = baseline_from(arr)
    if not (math.isfinite(L) and L > 0):
        raise ValueError(f"L must be positive, got {L}")
    z = standardise(arr, centre, sigma)
    return IndividualsChart(
        float(centre), float(sigma), centre - L * sigma, centre + L * sigma, z, np.abs(z) > L
    )


def check_lambda(lam: float) -> float:
    """An EWMA weight in (0, 1], else ValueError."""
    lam = float(lam)
    if not (0.0 < lam <= 1.0):
        raise ValueError(f"lambda must be in (0, 1], got {lam}")
    return lam


def ewma_statistic(x, lam: float, start: float) -> np.ndarray:
    """``z[i] = lam x[i] + (1 - lam) z[i-1]`` with ``z[-1] = start``.

    Parameters
    ----------
    x : array_like
        The series [unit of the figure].
    lam : float
        Weight of the newest point, ``0 < lam <= 1`` [-].
    start : float
        The value before the first point, normally the baseline centre [unit of the figure].

    Examples
    --------
    >>> ewma_statistic([1.0, 1.0], 0.5, 0.0).tolist()
    [0.5, 0.75]
    """
    arr = as_series(x)
    lam = check_lambda(lam)
    z, _ = lfilter([lam], [1.0, -(1.0 - lam)], arr, zi=[(1.0 - lam) * float(start)])
    return z


def ewma_sigma_factor(n: int, lam: float, exact: bool = True) -> np.ndarray:
    """Standard deviation of the EWMA at points 1..n in units of sigma.

    Notes
    -----
    ``sd(z_i) / sigma = sqrt(lam / (2 - lam) * (1 - (1 - lam)^(2 i)))`` (exact,
    time-varying); the asymptotic factor drops the bracket (Lucas & Saccucci
    1990, eq. 2; Montgomery 2013, eq. 9.25).

    Examples
    --------
    >>> ewma_sigma_factor(2, 0.1).round(4).tolist()
    [0.1, 0.1345]
    >>> round(float(ewma_sigma_factor(1, 0.1, exact=False)[0]), 4)
    0.2294
    """
    if n < 1:
        raise ValueError(f"n must be at least 1, got {n}")
    lam = check_lambda(lam)
    i = np.arange(1, n + 1)
    bracket = 1.0 - (1.0 - lam) ** (2 * i) if exact else np.ones(n)
    return np.sqrt(lam / (2.0 - lam) * bracket)


class EwmaChart(NamedTuple):
    """An EWMA chart: statistic, limits per point and signals."""

    statistic: np.ndarray
    lcl: np.ndarray
    ucl: np.ndarray
    signal: np.ndarray


def ewma_chart(
    x, centre: float, sigma: float, lam: float = 0.1, L: float = 2.814, exact: bool = True
) -> EwmaChart:
    """EWMA chart started at the centre, limits ``centre +/- L sigma sd-factor``.

    Parameters
    ----------
    x : array_like
        The figures to judge [unit of the figure].
    centre, sigma : float
        From a baseline [unit of the figure].
    lam : float
        EWMA weight [-]. The defaults (0.10, 2.814) give an in-control ARL of
        about 500 with asymptotic limits (Lucas & Saccucci 1990; their Table 3,
        table number from memory).
    L : float
        Limit width in standard deviations of the statistic [-].
    exact : bool
        Time-varying limits (narrower at the start) instead of asymptotic ones.

    Examples
    --------
    >>> c = ewma_chart([0.0, 3.0, 3.0, 3.0], centre=0.0, sigma=1.0, lam=0.5, L=3.0)
    >>> c.signal.tolist()
    [False, False, True, True]
    """
    z = ewma_statistic(x, lam, centre)
    half = L * check_sigma(sigma) * ewma_sigma_factor(z.size, lam, exact)
    return EwmaChart(z, centre - half, centre + half, np.abs(z - centre) > half)


class CusumChart(NamedTuple):
    """Two-sided tabular CUSUM in units of sigma."""

    upper: np.ndarray
    lower: np.ndarray
    signal_upper: np.ndarray
    signal_lower: np.ndarray


def tabular_cusum(
    x, centre: float, sigma: float, k: float = 0.5, h: float = 5.0, head_start: float = 0.0
) -> CusumChart:
    """Two-sided tabular CUSUM on standardised points, with optional head start.

    Parameters
    ----------
    x : array_like
        The figures to judge [unit of the figure].
    centre, sigma : float
        From a baseline [unit of the figure].
    k : float
        Reference value (allowance), half the shift to detect quickly [sigma].
    h : float
        Decision interval [sigma].
    head_start : float
        Fast initial response: both sums start here instead of 0, ``0 <= head_start < h``;
        ``h / 2`` is the usual choice (Lucas & Crosier 1982) [sigma].

    Returns
    -------
    CusumChart
        ``upper[i] = max(0, upper[i-1] + z[i] - k)``,
        ``lower[i] = max(0, lower[i-1] - z[i] - k)``, signals where a sum
        exceeds ``h``. The sums run on after a signal (no reset).

    Examples
    --------
    >>> c = tabular_cusum([0.0, 2.0, 2.0, 2.0, 2.0], 0.0, 1.0, k=0.5, h=4.0)
    >>> c.upper.tolist(), c.signal_upper.tolist()
    ([0.0, 1.5, 3.0, 4.5, 6.0], [False, False, False, True, True])
    """
    z = standardise(x, centre, sigma)
    if not (k >= 0 and h > 0 and math.isfinite(k) and math.isfinite(h)):
        raise ValueError(f"need k >= 0 and h > 0, got k={k}, h={h}")
    if not 0.0 <= head_start < h:
        raise ValueError(f"head start must be in [0, h), got {head_start}")
    upper, lower = np.empty_like(z), np.empty_like(z)
    up = lo = float(head_start)
    for i, zi in enumerate(z.tolist()):
        up = max(0.0, up + zi - k)
        lo = max(0.0, lo - zi - k)
        upper[i], lower[i] = up, lo
    return CusumChart(upper, lower, upper > h, lower > h)


def first_signal(flags) -> int | None:
    """Index of the first True along a 1-D (or per-point 2-D) flag array, or None.

    Examples
    --------
    >>> first_signal([False, False, True]), first_signal([False])
    (2, None)
    """
    arr = np.asarray(flags, dtype=bool)
    hit = arr.any(axis=tuple(range(1, arr.ndim))) if arr.ndim > 1 else arr
    idx = np.flatnonzero(hit)
    return int(idx[0]) if idx.size else None
