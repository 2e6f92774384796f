"""Average run lengths of the tabular CUSUM, one- and two-sided, with head start.

Zero-state ARLs of ``S+ = max(0, S+ + z - k)`` and ``S- = max(0, S- - z - k)``
on standardised points ``z``, signal when a sum exceeds ``h`` (all in sigma).
See `monitor.physics.run_length` for the conventions and the convergence
evidence each result carries.

The two-sided ARL from a zero start is ``1/ARL = 1/ARL+ + 1/ARL-`` (Lucas &
Crosier 1982, who give it for the two-sided scheme; the tests confirm it
against the two-dimensional chain). With a head start both sums start high at
once and the formula no longer holds, so the pair ``(S+, S-)`` is then solved
as one two-dimensional Markov chain.

References
----------
Page, E. S., "Continuous inspection schemes", Biometrika 41 (1954) 100-115.
Brook, D. & Evans, D. A., "An approach to the probability distribution of
cusum run length", Biometrika 59 (1972) 539-549.
Lucas, J. M. & Crosier, R. B., "Fast initial response for CUSUM
quality-control schemes", Technometrics 24 (1982) 199-205.
Siegmund, D., Sequential Analysis: Tests and Confidence Intervals, Springer
(1985) (the approximation with b = h + 1.166; page from memory: p. 27).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.sparse import coo_matrix, identity
from scipy.sparse.linalg import bicgstab, splu
from scipy.stats import norm

from .run_length import ArlResult, check_method, fixed_or_converged, gauss_legendre

#: Siegmund's correction of the decision interval for a normal CUSUM [sigma].
SIEGMUND_OFFSET = 1.166


def _check_design(k, h, head_start):
    if not (k >= 0 and h > 0 and math.isfinite(k) and math.isfinite(h)):
        raise ValueError(f"need k >= 0 and h > 0, got k={k}, h={h}")
    if not 0.0 <= head_start < h:
        raise ValueError(f"head start must be in [0, h), got {head_start}")


def _cusum_quadrature(k, h, shift, n, start):
    """One-sided upper CUSUM: Nystroem on [0, h] plus the atom at zero."""
    x, wts = gauss_legendre(0.0, h, n)
    u = np.concatenate(([0.0], x))
    a = np.empty((n + 1, n + 1))
    a[:, 0] = norm.cdf(k - u - shift)  # the sum falls back to zero
    a[:, 1:] = norm.pdf(x[None, :] + k - u[:, None] - shift) * wts[None, :]
    v = np.linalg.solve(np.eye(n + 1) - a, np.ones(n + 1))
    if start == 0.0:
        return float(v[0])
    tail = norm.pdf(x + k - start - shift) @ (wts * v[1:])
    return float(1.0 + v[0] * norm.cdf(k - start - shift) + tail)


def _interpolate(arl, width, start):
    """ARL at a start between state centres: linear in the state index."""
    pos = start / width
    i = min(int(pos), arl.size - 2)
    frac = pos - i
    return float((1.0 - frac) * arl[i] + frac * arl[i + 1])


def _cusum_markov(k, h, shift, n, start):
    """Brook & Evans: state 0 is [0, w/2), state i is [(i - 1/2) w, (i + 1/2) w)."""
    width = 2.0 * h / (2 * n - 1)
    mid = np.arange(n) * width
    upper = (np.arange(n) + 0.5) * width
    cdf = norm.cdf(upper[None, :] - mid[:, None] + k - shift)
    p = np.diff(np.concatenate((np.zeros((n, 1)), cdf), axis=1), axis=1)
    arl = np.linalg.solve(np.eye(n) - p, np.ones(n))
    return _interpolate(arl, width, start)


def cusum_arl_one_sided(
    k: float,
    h: float,
    shift: float = 0.0,
    *,
    head_start: float = 0.0,
    method: str = "quadrature",
    nodes: int | None = None,
    rtol: float | None = None,
) -> ArlResult:
    """Zero-state ARL of the upper CUSUM ``S = max(0, S + z - k)``, signal at ``S > h``.

    The lower CUSUM's ARL at shift ``d`` is the upper one's at ``-d``.

    Parameters
    ----------
    k, h : float
        Reference value and decision interval [sigma].
    shift : float
        Step shift of the mean present from the first point [sigma].
    head_start : float
        Starting value of the sum, ``0 <= head_start < h`` [sigma].
    method : {"quadrature", "markov"}
        Gauss-Legendre Nystroem solution or Brook & Evans' chain.
    nodes : int, optional
        Fixed number of nodes or states; default: doubled until converged.
    rtol : float, optional
        Convergence tolerance (default 1e-7 quadrature, 1e-4 chain).

    Notes
    -----
    ``A(u) = 1 + A(0) Phi(k - u - d) + int_0^h A(w) phi(w + k - u - d) dw``
    (Page 1954). The chain's start between state centres is interpolated
    linearly, which keeps its error of order 1/states^2.

    Examples
    --------
    >>> round(cusum_arl_one_sided(0.5, 4.0).arl, 1)
    335.4
    """
    check_method(method)
    _check_design(k, h, head_start)
    markov = method == "markov"
    fn = _cusum_markov if markov else _cusum_quadrature

    def solve(n):
        return fn(k, h, shift, n, head_start)

    rtol = rtol if rtol is not None else (1e-4 if markov else 1e-7)
    return fixed_or_converged(solve, nodes, 16, rtol, 3200 if markov else 1024)


def _two_sided_markov(k, h, shift, n, start):
    """The pair (S+, S-) as one chain on an n x n grid of Brook & Evans cells.

    From cell (i, j) a new point x moves S+ to max(0, a + x - k) and S- to
    max(0, b - x - k); the breakpoints where either crosses a cell edge cut the
    x axis into intervals, each leading to one cell, with the normal
    probability of the interval. Points beyond either limit are absorbed.
    """
    width = 2.0 * h / (2 * n - 1)
    edges = (np.arange(n) + 0.5) * width
    a = np.repeat(np.arange(n) * width, n)  # S+ of each state, state = i * n + j
    b = np.tile(np.arange(n) * width, n)
    lo = (b - k - h)[:, None]  # S- <= h
    hi = (h - a + k)[:, None]  # S+ <= h
    cuts = np.concatenate(
        (edges[None, :] - a[:, None] + k, b[:, None] - k - edges[None, :], lo, hi), axis=1
    )
    cuts = np.sort(np.clip(cuts, lo, hi), axis=1)
    left, right = cuts[:, :-1], cuts[:, 1:]
    mid = 0.5 * (left + right)
    to_i = np.minimum(np.floor(np.maximum(0.0, a[:, None] + mid - k) / width + 0.5), n - 1)
    to_j = np.minimum(np.floor(np.maximum(0.0, b[:, None] - mid - k) / width + 0.5), n - 1)
    prob = norm.cdf(right - shift) - norm.cdf(left - shift)
    keep = prob > 0.0
    rows = np.broadcast_to(np.arange(n * n)[:, None], prob.shape)[keep]
    cols = (to_i * n + to_j).astype(np.int64)[keep]
    p = coo_matrix((prob[keep], (rows, cols)), shape=(n * n, n * n)).tocsc()
    arl = _solve_sparse(identity(n * n, format="csc") - p).reshape(n, n)
    pos = start / width
    i = min(int(pos), n - 2)
    f = pos - i
    corners = arl[i : i + 2, i : i + 2]
    return float(
        (1 - f) ** 2 * corners[0, 0]
        + f * (1 - f) * (corners[0, 1] + corners[1, 0])
        + f * f * corners[1, 1]
    )


def _solve_sparse(a):
    """``a x = 1`` by BiCGSTAB (fast here), by sparse LU if it does not converge."""
    ones = np.ones(a.shape[0])
    x, info = bicgstab(a, ones, rtol=1e-12, maxiter=20000)
    if info != 0:
        x = splu(a, permc_spec="COLAMD").solve(ones)
    return x


def cusum_arl(
    k: float,
    h: float,
    shift: float = 0.0,
    *,
    head_start: float = 0.0,
    method: str = "quadrature",
    nodes: int | None = None,
    rtol: float | None = None,
) -> ArlResult:
    """Zero-state ARL of the two-sided tabular CUSUM, with optional head start.

    Parameters
    ----------
    k, h : float
        Reference value and decision interval [sigma].
    shift : float
        Step shift of the mean [sigma].
    head_start : float
        Both sums start here (fast initial response), ``0 <= head_start < h`` [sigma].
    method : {"quadrature", "markov"}
        For a zero start: how the one-sided ARLs are solved. A head start is
        always solved by the two-dimensional chain.
    nodes, rtol
        As for `cusum_arl_one_sided`, or for `two_sided_chain_arl` with a head start.

    Notes
    -----
    Zero start: ``1/ARL = 1/ARL+ + 1/ARL-`` (Lucas & Crosier 1982). Head
    start: `two_sided_chain_arl`, the chain on the pair of sums.

    Examples
    --------
    >>> round(cusum_arl(0.5, 4.0).arl, 1), round(cusum_arl(0.5, 4.0, 1.0).arl, 2)
    (167.7, 8.38)
    """
    check_method(method)
    _check_design(k, h, head_start)
    if head_start > 0.0:
        return two_sided_chain_arl(k, h, shift, head_start=head_start, nodes=nodes, rtol=rtol)
    options = {"method": method, "nodes": nodes, "rtol": rtol}
    up = cusum_arl_one_sided(k, h, shift, **options)
    down = cusum_arl_one_sided(k, h, -shift, **options)
    arl = 1.0 / (1.0 / up.arl + 1.0 / down.arl)
    return ArlResult(arl, max(up.nodes, down.nodes), max(up.rel_change, down.rel_change))


def two_sided_chain_arl(
    k: float,
    h: float,
    shift: float = 0.0,
    *,
    head_start: float = 0.0,
    nodes: int | None = None,
    rtol: float | None = None,
) -> ArlResult:
    """Two-sided CUSUM ARL from the chain on the pair of sums (any head start).

    Parameters
    ----------
    k, h, shift, head_start : float
        As for `cusum_arl` [sigma].
    nodes : int, optional
        Cells per axis; default: doubled from 32 until converged (at most 128).
    rtol : float, optional
        Convergence tolerance, default 1e-4.

    Notes
    -----
    The chain's error falls as 1/cells^2, so the answers for ``n/2`` and
    ``n`` cells are extrapolated (Richardson), ``(4 A(n) - A(n/2)) / 3``.

    Examples
    --------
    >>> round(two_sided_chain_arl(0.5, 4.0, head_start=2.0).arl, 1)
    148.7
    """
    _check_design(k, h, head_start)

    @functools.cache
    def chain(n):
        return _two_sided_markov(k, h, shift, n, head_start)

    def solve(n):
        return (4.0 * chain(n) - chain(n // 2)) / 3.0

    rtol = rtol if rtol is not None else 1e-4
    return fixed_or_converged(solve, nodes, 32, rtol, 128)


def siegmund_cusum_arl(k: float, h: float, shift: float = 0.0) -> float:
    """Siegmund's approximation of the two-sided CUSUM ARL (zero start).

    Notes
    -----
    One-sided ``ARL ~ (exp(-2 D b) + 2 D b - 1) / (2 D^2)`` with ``D = d - k``
    (upper) or ``-d - k`` (lower) and ``b = h + 1.166``; ``b^2`` when ``D = 0``
    (Siegmund 1985); then combined as in `cusum_arl`.

    Examples
    --------
    >>> round(siegmund_cusum_arl(0.5, 5.0))
    469
    """
    _check_design(k, h, 0.0)
    b = h + SIEGMUND_OFFSET

    def one_sided(delta):
        if abs(delta) < 1e-12:
            return b * b
        return (math.exp(-2 * delta * b) + 2 * delta * b - 1) / (2 * delta * delta)

    return 1.0 / (1.0 / one_sided(shift - k) + 1.0 / one_sided(-shift - k))
