"""Average run lengths of an individuals chart with Western Electric run rules.

Exactly, by a Markov chain whose state is the zone of the last four points and
the length of the current run on one side of the centre (Champ & Woodall
1987), and by a seeded simulation that applies the very flags of
`monitor.physics.run_rules.western_electric_rules`, so each checks the other.

References
----------
Champ, C. W. & Woodall, W. H., "Exact results for Shewhart control charts with
supplementary runs rules", Technometrics 29 (1987) 393-399.
Western Electric Co., Statistical Quality Control Handbook (1956).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy.sparse import coo_matrix, identity
from scipy.sparse.linalg import splu
from scipy.stats import norm

from .run_rules import WESTERN_ELECTRIC_RULES, run_rule_flags

#: Zone codes of a non-signalling point: +1 (0, 1], +2 (1, 2], +3 (2, 3] sigma, and
#: the same negative below the centre; 0 pads the history before the first point.
ZONES = (-3, -2, -1, 1, 2, 3)
_HISTORY = 4  # points rule 3 looks back (four of five)
_RUN = 8  # rule 4: points in a row on one side


def _check_rules(rules) -> frozenset:
    rules = frozenset(int(r) for r in rules)
    if 1 not in rules or not rules <= set(WESTERN_ELECTRIC_RULES):
        raise ValueError(f"rules must be a subset of 1-4 that includes 1, got {sorted(rules)}")
    return rules


def _zone_probabilities(shift: float) -> dict[int, float]:
    edges = {1: (0.0, 1.0), 2: (1.0, 2.0), 3: (2.0, 3.0)}
    probs = {}
    for zone in ZONES:
        lo, hi = edges[abs(zone)]
        if zone < 0:
            lo, hi = -hi, -lo
        probs[zone] = float(norm.cdf(hi - shift) - norm.cdf(lo - shift))
    return probs


def _step(state, zone, rules):
    """The next state after a point in ``zone``, or None when a rule fires."""
    history, run = state
    sign = 1 if zone > 0 else -1
    beyond_2 = sum(1 for z in history[-2:] if z * sign == 3)  # of the last two
    if 2 in rules and abs(zone) == 3 and beyond_2 >= 1:
        return None
    beyond_1 = sum(1 for z in history if z * sign >= 2)  # of the last four
    if 3 in rules and abs(zone) >= 2 and beyond_1 >= 3:
        return None
    run = run + sign if run * sign > 0 else sign
    if 4 in rules and abs(run) >= _RUN:
        return None
    depth = _HISTORY if 3 in rules else (2 if 2 in rules else 0)
    history = (history + (zone,))[-depth:] if depth else ()
    return history, (run if 4 in rules else 0)


def _initial_state(rules):
    depth = _HISTORY if 3 in rules else (2 if 2 in rules else 0)
    return (0,) * depth, 0


def run_rules_transitions(rules=(1, 2, 3, 4), shift: float = 0.0):
    """Transient states reachable from a fresh start and their transition matrix.

    Returns
    -------
    states : list of tuple
        ``(zones of the last points, signed run length)``; state 0 is the start.
    q : scipy.sparse.csc_matrix
        ``q[i, j]`` = probability of moving from state i to state j without a signal.

    Examples
    --------
    >>> states, q = run_rules_transitions((1, 4))
    >>> len(states), round(float(q[0].sum()), 4)  # 7 runs a side + start; P(|z| <= 3)
    (15, 0.9973)
    """
    rules = _check_rules(rules)
    probs = _zone_probabilities(shift)
    start = _initial_state(rules)
    index = {start: 0}
    states, rows, cols, vals = [start], [], [], []
    i = 0
    while i < len(states):  # breadth-first over reachable states
        for zone in ZONES:
            nxt = _step(states[i], zone, rules)
            if nxt is None:
                continue
            if nxt not in index:
                index[nxt] = len(states)
                states.append(nxt)
            rows.append(i)
            cols.append(index[nxt])
            vals.append(probs[zone])
        i += 1
    n = len(states)
    q = coo_matrix((vals, (rows, cols)), shape=(n, n)).tocsc()
    return states, q


def run_rules_arl(rules=(1, 2, 3, 4), shift: float = 0.0) -> float:
    """Zero-state ARL of an individuals chart with the given Western Electric rules.

    Parameters
    ----------
    rules : iterable of int
        Subset of rules 1-4 that includes rule 1 (beyond 3 sigma), as in the
        published tables: a point beyond 3 sigma is not a zone state.
    shift : float
        Step shift of the mean present from the first point [sigma].

    Notes
    -----
    ``ARL = e_0' (I - Q)^-1 1`` over the transient states (Champ & Woodall
    1987); solved by sparse LU.

    Examples
    --------
    >>> round(run_rules_arl((1, 2)), 2)
    225.44
    """
    _, q = run_rules_transitions(rules, shift)
    n = q.shape[0]
    arl = splu((identity(n, format="csc") - q).tocsc()).solve(np.ones(n))
    return float(arl[0])


class SimulatedArl(NamedTuple):
    """A simulated ARL with its standard error."""

    arl: float
    standard_error: float
    runs: int


def simulate_run_rules_arl(
    rules=(1, 2, 3, 4),
    shift: float = 0.0,
    runs: int = 20000,
    seed: int = 0,
    block: int = 512,
) -> SimulatedArl:
    """ARL by seeded simulation, applying the same flags as the charts do.

    Parameters
    ----------
    rules : iterable of int
        Subset of rules 1-4 that includes rule 1.
    shift : float
        Step shift of the mean from the first point [sigma].
    runs : int
        Number of independent runs, each continued until its first signal.
    seed : int
        Seed of ``numpy.random.default_rng``.
    block : int
        Points simulated at a time for the runs still going.

    Returns
    -------
    SimulatedArl
        Mean run length and its standard error ``sd / sqrt(runs)``.

    Examples
    --------
    >>> r = simulate_run_rules_arl((1,), shift=3.0, runs=2000, seed=1)
    >>> abs(r.arl - 2.0) < 4 * r.standard_error
    True
    """
    rules = tuple(sorted(_check_rules(rules)))
    if runs < 2 or block < _RUN:
        raise ValueError("need at least 2 runs and blocks of at least 8 points")
    rng = np.random.default_rng(seed)
    lengths = np.zeros(runs, dtype=np.int64)
    going = np.arange(runs)
    tail = np.full((runs, _RUN - 1), np.nan)  # padding: no history before the start
    done = 0
    while going.size:
        z = rng.standard_normal((going.size, block)) + shift
        flags = run_rule_flags(np.concatenate((tail, z), axis=1), rules).any(axis=-1)
        flags = flags[:, _RUN - 1 :]
        hit = flags.any(axis=1)
        first = np.argmax(flags, axis=1)
        lengths[going[hit]] = done + first[hit] + 1
        going, tail = going[~hit], z[~hit, -(_RUN - 1) :]
        done += block
    sd = float(lengths.std(ddof=1))
    return SimulatedArl(float(lengths.mean()), sd / math.sqrt(runs), runs)
