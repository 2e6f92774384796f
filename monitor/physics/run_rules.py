"""Western Electric run rules 1-4 on an individuals chart: which rule fired where.

References
----------
Western Electric Co., Statistical Quality Control Handbook (1956), the zone
rules 1-4 (pages from memory: about pp. 25-28).
Montgomery, D. C., Introduction to Statistical Quality Control, 7th ed., Wiley
(2013), 5.3.6 (sensitizing rules; section number from memory).
"""

from __future__ import annotations

import numpy as np

from .spc import standardise

#: The Western Electric zone rules, by number.
WESTERN_ELECTRIC_RULES = {
    1: "one point beyond 3 sigma",
    2: "two of three consecutive points beyond 2 sigma on the same side",
    3: "four of five consecutive points beyond 1 sigma on the same side",
    4: "eight consecutive points on the same side of the centre line",
}


def run_rule_flags(z: np.ndarray, rules=(1, 2, 3, 4)) -> np.ndarray:
    """Western Electric rules on standardised points along the last axis.

    Parameters
    ----------
    z : numpy.ndarray
        Standardised points, ``(x - centre) / sigma``, in time order along the
        last axis (many series at once for simulations) [sigma]. NaN pads a
        series before its first point: it is on neither side and beyond nothing.
    rules : tuple of int
        Which of rules 1-4 to apply.

    Returns
    -------
    numpy.ndarray of bool, shape ``z.shape + (4,)``
        Column ``r - 1`` is rule ``r`` (all False for a rule not asked for).

    Examples
    --------
    >>> run_rule_flags(np.array([np.nan, 2.5, 2.2]))[..., 1].tolist()
    [False, False, True]
    """
    bad = set(rules) - set(WESTERN_ELECTRIC_RULES)
    if bad:
        raise ValueError(f"unknown run rules {sorted(bad)}; known: 1, 2, 3, 4")
    z = np.asarray(z, dtype=float)
    flags = np.zeros(z.shape + (4,), dtype=bool)
    with np.errstate(invalid="ignore"):
        if 1 in rules:
            flags[..., 0] = np.abs(z) > 3.0
        for rule, limit, window, needed in ((2, 2.0, 3, 2), (3, 1.0, 5, 4), (4, 0.0, 8, 8)):
            if rule not in rules:
                continue
            for side in (z > limit, z < -limit):
                count = _trailing_count(side, window)
                flags[..., rule - 1] |= side & (count >= needed)
    return flags


def _trailing_count(mask: np.ndarray, window: int) -> np.ndarray:
    """Number of True in the ``window`` points ending at each point (fewer at the start)."""
    c = np.cumsum(mask, axis=-1, dtype=np.int64)
    shifted = np.zeros_like(c)
    shifted[..., window:] = c[..., :-window]
    return c - shifted


def western_electric_rules(x, centre: float, sigma: float, rules=(1, 2, 3, 4)) -> np.ndarray:
    """Which Western Electric rule fired at which point.

    Parameters
    ----------
    x : array_like
        The figures in time order [unit of the figure].
    centre, sigma : float
        From a baseline [unit of the figure].
    rules : iterable of int
        Which of rules 1-4 to apply (see `WESTERN_ELECTRIC_RULES`).

    Returns
    -------
    numpy.ndarray of bool, shape (n, 4)
        ``fired[i, r - 1]`` is True when rule ``r`` fires at point ``i``.

    Notes
    -----
    A rule fires at the point that completes its pattern, and that point must
    itself be one of the pattern's points (for rule 2, itself beyond 2 sigma on
    the pattern's side), so a pattern is not reported again at every later
    point of its window. Near the start a window holds the points there are:
    two points beyond 2 sigma at points 0 and 1 fire rule 2. For the first
    signal this convention changes nothing, so the run lengths of
    `monitor.physics.run_length_rules` apply.

    Examples
    --------
    >>> f = western_electric_rules([0.5, 2.5, 0.1, 2.4, 3.5], 0.0, 1.0)
    >>> [sorted(int(r) + 1 for r in np.flatnonzero(row)) for row in f]
    [[], [], [], [2], [1, 2]]
    """
    return run_rule_flags(standardise(x, centre, sigma), tuple(rules))
