"""The first-order reversible law A <=> R along a trace: exact linear steps.

Not separable (``K_c`` depends on temperature), so it is integrated along the
trace: over each short interval the law is linear in X and is stepped exactly
for every activity at once.
"""

from __future__ import annotations

import numpy as np

from .arrhenius import R_J_PER_MOL_K
from .quadrature import GL_NODES, GL_WEIGHTS, REVERSIBLE_EXPONENT_STEP, split_cells


def reversible_segments(
    t_s, T_K, ea_j_per_mol, t_ref_k, k_ref, k_eq_ref, dh_rxn_j_per_mol, theta_r
):
    """Per-interval coefficients of the first-order reversible law, for any activity.

    Over an interval the law ``dX/dt = alpha k [(1 - theta_r/K) - (1 + 1/K) X]`` is
    linear in X; with ``C = int k (1 + 1/K) ds`` and ``A = int k (1 - theta_r/K) ds``
    (Gauss-Legendre, as for `segment_integrals`) one step is
    ``X1 = X* + (X0 - X*) exp(-alpha C)``, ``X* = A/C``. The frozen-coefficient error is
    of second order in the change of ``X*`` over the interval, so a long interval with a
    changing temperature must be cut first with `refine_trace` (the quadrature cells here
    are summed back per interval and do not shorten the step).

    Returns
    -------
    C, A : numpy.ndarray
        Per interval [-] (``k_ref`` times seconds).
    """
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(T_K, dtype=float)
    scale = max(abs(ea_j_per_mol), abs(dh_rxn_j_per_mol), 1.0)
    a, b, Ta, Tb, split = split_cells(t[:-1], t[1:], T[:-1], T[1:], scale, t_ref_k)
    half = (b - a) / 2.0
    Tn = (Ta + Tb)[:, None] / 2.0 + ((Tb - Ta) / 2.0)[:, None] * GL_NODES[None, :]
    inv = -(1.0 / Tn - 1.0 / t_ref_k) / R_J_PER_MOL_K
    k = k_ref * np.exp(ea_j_per_mol * inv)
    K = k_eq_ref * np.exp(dh_rxn_j_per_mol * inv)
    C = half * (k * (1.0 + 1.0 / K) * GL_WEIGHTS).sum(axis=1)
    A = half * (k * (1.0 - theta_r / K) * GL_WEIGHTS).sum(axis=1)
    if split is not None:
        owner, n = split
        C, A = (np.bincount(owner, v, minlength=n) for v in (C, A))
    return C, A


def refine_trace(t_s, T_K, scale_j_per_mol, t_ref_k, max_step=REVERSIBLE_EXPONENT_STEP):
    """Cut intervals whose exponent ``scale/R (1/T)`` changes by more than ``max_step``.

    ``T`` stays piecewise linear, so integrals over the refined trace are unchanged.
    The default step keeps the frozen-coefficient error of `step_reversible` on a
    coarse trace near that of a 5-s sampled one.

    Returns
    -------
    t, T, at : numpy.ndarray
        Refined times [s] and temperatures [K]; ``at`` holds the index of each
        original sample in the refined arrays.

    Examples
    --------
    >>> t, T, at = refine_trace([0.0, 60.0], [343.15, 343.15], 65e3, 343.15)
    >>> t.tolist(), at.tolist()
    ([0.0, 60.0], [0, 1])
    """
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(T_K, dtype=float)
    if len(t) < 2:
        return t, T, np.arange(len(t))
    beta = scale_j_per_mol / R_J_PER_MOL_K
    m = np.maximum(1, np.ceil(beta * np.abs(1.0 / T[:-1] - 1.0 / T[1:]) / max_step)).astype(int)
    at = np.concatenate([[0], np.cumsum(m)])
    if at[-1] == len(t) - 1:
        return t, T, at
    owner = np.repeat(np.arange(len(m)), m)
    frac = (np.arange(at[-1]) - at[owner]) / m[owner]
    t_f = np.append(t[owner] + frac * np.diff(t)[owner], t[-1])
    T_f = np.append(T[owner] + frac * np.diff(T)[owner], T[-1])
    return t_f, T_f, at


def step_reversible(X0, alpha, C, A):
    """Advance the reversible law over intervals; returns X after each [-].

    ``X0`` and ``alpha`` broadcast together (e.g. a grid of activities); the result
    has one more leading axis of length ``len(C)``.
    """
    X = np.asarray(X0, dtype=float) * np.ones_like(np.asarray(alpha, dtype=float))
    out = np.empty((len(C),) + X.shape)
    x_star = np.where(C > 0, A / np.where(C > 0, C, 1.0), 0.0)
    for i in range(len(C)):
        X = x_star[i] + (X - x_star[i]) * np.exp(-alpha * C[i])
        out[i] = X
    return out
