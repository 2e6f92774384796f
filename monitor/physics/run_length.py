"""Average run lengths (ARL) of the Shewhart individuals and EWMA charts.

The ARL is the expected number of points up to and including the first
signal, counted from a fresh start (zero-state). In control it is the mean
number of batches between false signals; after a step shift of ``shift``
sigmas from the first point on, the mean number of batches to detection.
Points are independent normal with known in-control mean and sigma.

EWMA and CUSUM ARLs solve the run-length integral equation, either by the
Nystroem method with Gauss-Legendre nodes (Crowder 1987) or by the
Markov-chain approximation (Brook & Evans 1972; Lucas & Saccucci 1990). The
number of nodes or states is doubled until two successive answers agree to
``rtol``; the result carries the final size and the last relative change, so
every number states how converged it is. The CUSUM's ARLs are in
`monitor.physics.run_length_cusum`, the run rules' in
`monitor.physics.run_length_rules`.

References
----------
Brook, D. & Evans, D. A., "An approach to the probability distribution of
cusum run length", Biometrika 59 (1972) 539-549.
Crowder, S. V., "A simple method for studying run-length distributions of
exponentially weighted moving average charts", Technometrics 29 (1987)
401-407.
Lucas, J. M. & Saccucci, M. S., Technometrics 32 (1990) 1-12.
Knoth, S., "EWMA schemes with non-homogeneous transition kernels",
Sequential Analysis 22 (2003) 241-255 (time-varying limits).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from typing import NamedTuple

import numpy as np
from scipy.stats import norm

from .spc import check_lambda, ewma_sigma_factor

METHODS = ("quadrature", "markov")
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)
_ROUNDING = 64 * np.finfo(float).eps  # attainable relative precision per unit of ARL


class ArlResult(NamedTuple):
    """An ARL with the evidence that it converged."""

    arl: float
    nodes: int  #: quadrature nodes or Markov states of the final solve
    rel_change: float  #: relative change from the solve with half as many


def shewhart_arl(L: float = 3.0, shift: float = 0.0) -> float:
    """ARL of an individuals chart with limits at +/- L sigma.

    Notes
    -----
    Each point signals independently with ``p = Phi(-L - d) + 1 - Phi(L - d)``,
    so the run length is geometric and ``ARL = 1 / p`` (Montgomery 2013, 6.4).

    Examples
    --------
    >>> round(shewhart_arl(3.0), 1)
    370.4
    """
    if not (math.isfinite(L) and L > 0):
        raise ValueError(f"L must be positive, got {L}")
    p = norm.cdf(-L - shift) + norm.sf(L - shift)
    return float(1.0 / p)


def converge(solve: Callable[[int], float], start: int, rtol: float, max_nodes: int) -> ArlResult:
    """Double the size passed to ``solve`` until two answers agree to ``rtol``.

    ``I - A`` is nearly singular for a huge ARL (condition number about the
    ARL), so no answer is better than about ``eps * ARL`` relative; the
    tolerance is widened to that where it is larger than ``rtol``.

    Examples
    --------
    >>> converge(lambda n: 2.0 + 1.0 / n**4, 4, 1e-6, 1024).nodes
    64
    """
    if not rtol > 0:
        raise ValueError(f"rtol must be positive, got {rtol}")
    n, prev = start, solve(start)
    while True:
        n *= 2
        cur = solve(n)
        rel = abs(cur - prev) / abs(cur)
        if rel <= max(rtol, _ROUNDING * abs(cur)):
            return ArlResult(float(cur), n, float(rel))
        if n >= max_nodes:
            raise ValueError(f"ARL not converged to {rtol} with {n} nodes (last change {rel:.2g})")
        prev = cur


def fixed_or_converged(solve, nodes, start, rtol, max_nodes) -> ArlResult:
    """`converge` when ``nodes`` is None, else one solve with its change from ``nodes // 2``."""
    if nodes is None:
        return converge(solve, start, rtol, max_nodes)
    if nodes < 2:
        raise ValueError(f"nodes must be at least 2, got {nodes}")
    cur, half = solve(nodes), solve(max(1, nodes // 2))
    return ArlResult(float(cur), int(nodes), float(abs(cur - half) / abs(cur)))


@functools.lru_cache(maxsize=64)
def _legendre(n: int):
    return np.polynomial.legendre.leggauss(n)


def gauss_legendre(a: float, b: float, n: int):
    """Nodes and weights of the n-point Gauss-Legendre rule on [a, b]."""
    x, w = _legendre(n)
    return 0.5 * (b - a) * x + 0.5 * (b + a), 0.5 * (b - a) * w


def std_normal_pdf(t):
    """phi(t), without scipy's per-call overhead (called in tight loops)."""
    return np.exp(-0.5 * np.square(t)) * _INV_SQRT_2PI


def _ewma_kernel(u, w, lam, shift):
    """Density of the next EWMA value ``w`` given the current ``u`` (units of sigma)."""
    return std_normal_pdf((w - (1.0 - lam) * u) / lam - shift) / lam


def _ewma_quadrature(lam, c, shift, n):
    """Nodes, weights and ARL function values at the nodes for fixed limits +/- c."""
    x, wts = gauss_legendre(-c, c, n)
    a = _ewma_kernel(x[:, None], x[None, :], lam, shift) * wts[None, :]
    v = np.linalg.solve(np.eye(n) - a, np.ones(n))
    return x, wts, v


def _ewma_arl_fixed(lam, c, shift, n, start=0.0):
    x, wts, v = _ewma_quadrature(lam, c, shift, n)
    return 1.0 + float(_ewma_kernel(start, x, lam, shift) @ (wts * v))


def _ewma_arl_varying(lam, L, shift, n):
    """Zero-state ARL with limits ``L sd(z_i)``: backward recursion to the fixed limits."""
    steps = 1 if lam == 1.0 else max(1, math.ceil(math.log(1e-12) / (2 * math.log(1 - lam))))
    c = L * ewma_sigma_factor(steps, lam, exact=True)
    x_inf, w_inf, v_inf = _ewma_quadrature(lam, L * math.sqrt(lam / (2 - lam)), shift, n)
    x_next, w_next = gauss_legendre(-c[-1], c[-1], n)
    # beyond the last step the limits are the asymptotic ones to 1e-12
    v_next = 1.0 + _ewma_kernel(x_next[:, None], x_inf[None, :], lam, shift) @ (w_inf * v_inf)
    for ci in c[-2::-1]:
        x, wts = gauss_legendre(-ci, ci, n)
        v_next = 1.0 + _ewma_kernel(x[:, None], x_next[None, :], lam, shift) @ (w_next * v_next)
        x_next, w_next = x, wts
    return 1.0 + float(_ewma_kernel(0.0, x_next, lam, shift) @ (w_next * v_next))


def _ewma_markov(lam, c, shift, n_half):
    """Lucas & Saccucci's chain: 2 n_half + 1 states across (-c, c), start in the middle."""
    n = 2 * n_half + 1
    width = 2.0 * c / n
    mid = -c + (np.arange(n) + 0.5) * width
    lo = ((mid[None, :] - width / 2) - (1 - lam) * mid[:, None]) / lam - shift
    hi = ((mid[None, :] + width / 2) - (1 - lam) * mid[:, None]) / lam - shift
    p = norm.cdf(hi) - norm.cdf(lo)
    arl = np.linalg.solve(np.eye(n) - p, np.ones(n))
    return float(arl[n_half])


def check_method(method: str) -> None:
    """A known solution method, else ValueError."""
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}, got {method!r}")


def ewma_arl(
    lam: float,
    L: float,
    shift: float = 0.0,
    *,
    limits: str = "asymptotic",
    method: str = "quadrature",
    nodes: int | None = None,
    rtol: float | None = None,
) -> ArlResult:
    """Zero-state ARL of a two-sided EWMA chart started at the centre.

    Parameters
    ----------
    lam : float
        EWMA weight, ``0 < lam <= 1`` [-].
    L : float
        Limit width in standard deviations of the statistic [-].
    shift : float
        Step shift of the mean present from the first point [sigma].
    limits : {"asymptotic", "exact"}
        Fixed limits ``+/- L sigma sqrt(lam/(2-lam))`` (Lucas & Saccucci's
        tables) or the exact time-varying ones of `monitor.physics.spc.ewma_chart`.
    method : {"quadrature", "markov"}
        Gauss-Legendre Nystroem solution or Markov chain (asymptotic limits only).
    nodes : int, optional
        Fixed number of nodes (Markov: half the states); default: doubled until converged.
    rtol : float, optional
        Convergence tolerance (default 1e-7 for quadrature, 1e-4 for the chain,
        whose error falls only as 1/states^2).

    Notes
    -----
    With ``z`` in units of sigma, the ARL ``A(u)`` from ``z = u`` solves
    ``A(u) = 1 + (1/lam) int_{-c}^{c} A(w) phi((w - (1-lam) u)/lam - shift) dw``
    with ``c = L sqrt(lam/(2-lam))`` (Crowder 1987). With exact limits the
    kernel's interval changes each step; the recursion runs backwards from
    the step where the limits equal the asymptotic ones to 1e-12 (Knoth 2003).

    Examples
    --------
    >>> r = ewma_arl(0.10, 2.814)
    >>> round(r.arl), r.rel_change < 1e-7
    (500, True)
    """
    lam = check_lambda(lam)
    check_method(method)
    if not (math.isfinite(L) and L > 0):
        raise ValueError(f"L must be positive, got {L}")
    c = L * math.sqrt(lam / (2.0 - lam))
    if limits == "asymptotic" and method == "quadrature":

        def solve(n):
            return _ewma_arl_fixed(lam, c, shift, n)

    elif limits == "asymptotic":

        def solve(n):
            return _ewma_markov(lam, c, shift, n)

    elif limits == "exact" and method == "quadrature":

        def solve(n):
            return _ewma_arl_varying(lam, L, shift, n)

    else:
        raise ValueError(f"limits must be 'asymptotic' or 'exact' (quadrature), got {limits!r}")
    markov = method == "markov"
    rtol = rtol if rtol is not None else (1e-4 if markov else 1e-7)
    return fixed_or_converged(solve, nodes, 16, rtol, 3200 if markov else 1024)


def _about(n: float) -> str:
    """A run length as people say it: two significant figures from 100 up."""
    if n >= 100:
        return f"{round(n, 1 - int(math.floor(math.log10(n)))):,.0f}"
    return f"{n:.0f}" if n >= 10 else f"{n:.1f}"


def describe_design(
    arl_in_control: float,
    unit: str = "batches",
    shift: float | None = None,
    arl_shifted: float | None = None,
) -> str:
    """One plain sentence for what a chart design means.

    Examples
    --------
    >>> describe_design(499.6)
    'about one false signal in 500 batches'
    >>> print(describe_design(465.4, shift=1.0, arl_shifted=10.38))
    about one false signal in 470 batches; a shift of 1 sigma is caught in about 10 batches
    """
    if not (math.isfinite(arl_in_control) and arl_in_control >= 1):
        raise ValueError(f"an ARL is at least 1, got {arl_in_control}")
    text = f"about one false signal in {_about(arl_in_control)} {unit}"
    if (shift is None) != (arl_shifted is None):
        raise ValueError("give both shift and arl_shifted, or neither")
    if shift is not None:
        if not (math.isfinite(arl_shifted) and arl_shifted >= 1):
            raise ValueError(f"an ARL is at least 1, got {arl_shifted}")
        text += f"; a shift of {shift:g} sigma is caught in about {_about(arl_shifted)} {unit}"
    return text
