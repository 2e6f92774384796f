"""Where a step change in the mean began, and how large it is, once a chart signals.

Indices are 0-based positions in the charted series. A change point is
reported as the index of the *first* point believed to come from the changed
process (Samuel, Pignatiello & Calvin's tau is the last in-control point, so
their tau equals our index in 1-based counting).

References
----------
Samuel, T. R., Pignatiello, J. J. & Calvin, J. A., "Identifying the time of a
step change with X-bar control charts", Quality Engineering 10 (1998) 521-527,
doi:10.1080/08982119808919166 (the estimator, here with subgroups of one).
Issue #13 cites it as J. Quality Technology 30 (1998); the venue above is the
one printed on the article. Pignatiello, J. J. & Samuel, T. R., "Estimation of
the change point of a normal process mean in SPC applications", J. Quality
Technology 33 (2001) 82-95 (the same estimator after EWMA and CUSUM signals;
from memory).
Page, E. S., "Continuous inspection schemes", Biometrika 41 (1954) 100-115;
Montgomery, D. C., Introduction to Statistical Quality Control, 7th ed.
(2013), 9.1.2 (the CUSUM's last zero as the estimate of the change).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .spc import as_series, check_sigma


class StepChange(NamedTuple):
    """An estimated step change of the mean."""

    index: int  #: first point of the changed process (0-based)
    shift: float  #: mean of the points from ``index`` to ``end`` minus the centre
    shift_se: float  #: ``sigma / sqrt(n_after)``, given the change point
    n_after: int  #: points from ``index`` to ``end`` inclusive
    log_likelihood_ratio: float  #: of "step at index" against "no step"


def _end_index(n: int, end: int | None) -> int:
    end = n - 1 if end is None else int(end)
    if not 0 <= end < n:
        raise ValueError(f"end must index the series (0..{n - 1}), got {end}")
    return end


def shift_estimate(x, centre: float, sigma: float, index: int, end: int | None = None):
    """Size of a step from ``index`` to ``end`` (inclusive) and its standard error.

    Parameters
    ----------
    x : array_like
        The series [unit of the figure].
    centre, sigma : float
        Baseline centre and sigma [unit of the figure].
    index : int
        First point of the changed process.
    end : int, optional
        Last point to use (default: the last point).

    Returns
    -------
    StepChange
        ``shift = mean(x[index:end+1]) - centre``, ``shift_se = sigma / sqrt(m)``
        with ``m`` points.

    Notes
    -----
    The standard error treats the change point as known and the baseline
    sigma as exact. When the change point was itself estimated from the same
    points the shift is biased away from zero for small ``m`` (the estimator
    picks the segment that looks most shifted), so read it as a lower bound
    on the uncertainty (Pignatiello & Samuel 2001).

    Examples
    --------
    >>> s = shift_estimate([0.0, 0.0, 2.0, 3.0], 0.0, 1.0, index=2)
    >>> s.shift, round(s.shift_se, 4), s.n_after
    (2.5, 0.7071, 2)
    """
    arr = as_series(x)
    sigma = check_sigma(sigma)
    end = _end_index(arr.size, end)
    if not 0 <= index <= end:
        raise ValueError(f"index must be in 0..{end}, got {index}")
    m = end - index + 1
    shift = float(arr[index : end + 1].mean() - centre)
    llr = m * shift**2 / (2.0 * sigma**2)
    return StepChange(int(index), shift, sigma / math.sqrt(m), m, llr)


def step_change_mle(x, centre: float, sigma: float, end: int | None = None) -> StepChange:
    """Maximum-likelihood time of a step change of a normal mean with known baseline.

    Parameters
    ----------
    x : array_like
        The series up to (at least) the signal [unit of the figure].
    centre, sigma : float
        In-control mean and sigma, from a baseline [unit of the figure].
    end : int, optional
        Index of the point where the chart signalled (default: the last point).

    Returns
    -------
    StepChange
        The index maximising the likelihood, the shift and its standard error.

    Notes
    -----
    For points ``0..T`` (``T = end``) with a step of unknown size after the
    last in-control point, the log-likelihood ratio of a step starting at
    index ``s`` is ``(T - s + 1) (xbar[s..T] - mu0)^2 / (2 sigma^2)``, so the
    estimate is ``argmax_s (T - s + 1)(xbar[s..T] - mu0)^2`` over
    ``s = 0..T`` (Samuel, Pignatiello & Calvin 1998). Ties go to the earliest
    index.

    Examples
    --------
    >>> x = [0.1, -0.2, 0.0, 0.3, 2.1, 1.8, 2.4]
    >>> step_change_mle(x, 0.0, 1.0).index
    4
    """
    arr = as_series(x)
    sigma = check_sigma(sigma)
    end = _end_index(arr.size, end)
    dev = arr[: end + 1] - float(centre)
    tail_sums = np.cumsum(dev[::-1])[::-1]  # sum of dev[s..end] for each s
    m = np.arange(end + 1, 0, -1)
    index = int(np.argmax(tail_sums**2 / m))
    return shift_estimate(arr, centre, sigma, index, end)


def cusum_last_zero(sums, signal_index: int) -> int:
    """First point after the last zero of a one-sided CUSUM before its signal.

    Parameters
    ----------
    sums : array_like
        One side of a tabular CUSUM (``CusumChart.upper`` or ``.lower``) [sigma].
    signal_index : int
        Where that side signalled.

    Returns
    -------
    int
        ``j + 1`` for the last ``j < signal_index`` with ``sums[j] == 0``; 0
        when the sum was never zero before (e.g. a head start that never
        emptied), meaning the change is no later than the first point.

    Notes
    -----
    The sum restarts from zero each time the process looks in control, so the
    points since its last zero are those that built up the signal
    (Montgomery 2013, 9.1.2; Page 1954).

    Examples
    --------
    >>> cusum_last_zero([0.0, 0.4, 0.0, 1.5, 3.0, 4.5], 5)
    3
    """
    arr = as_series(sums)
    if not 0 <= signal_index < arr.size:
        raise ValueError(f"signal index must index the sums (0..{arr.size - 1})")
    zeros = np.flatnonzero(arr[:signal_index] <= 0.0)
    return int(zeros[-1] + 1) if zeros.size else 0
