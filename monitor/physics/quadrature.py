"""Quadrature of the Arrhenius factor along a measured temperature trace.

For a separable law ``G(X) = alpha k_ref s Theta(t)`` with the
*reference-equivalent time*

    Theta(t) = int_0^t exp[-(Ea/R)(1/T(s) - 1/T_ref)] ds   [s],

the seconds at ``T_ref`` that did the same work. ``T(s)`` is taken piecewise
linear between samples and each interval is integrated by 4-point
Gauss-Legendre quadrature, subdivided where the exponent changes by more
than ``MAX_EXPONENT_STEP`` across the interval, so the quadrature error is far
below any measurement error. This is the temperature integral of
non-isothermal kinetics (Vyazovkin et al., ICTAC Kinetics Committee
recommendations, Thermochim. Acta 520 (2011) 1-19, doi:10.1016/j.tca.2011.03.034).

Besides ``Theta`` the trace keeps the first two moments of the exponent's
sensitivity to ``Ea`` (``S1 = int f g ds`` and ``S2 = int f g^2 ds`` with
``g = -(1/T - 1/T_ref)/R``), so the effect of an Ea perturbation ``d`` is
``ln Theta(Ea + d) ~ ln Theta + d S1/Theta + d^2 (S2/Theta - (S1/Theta)^2)/2``
without re-integrating: this is what lets a Monte Carlo forecast draw Ea.
"""

from __future__ import annotations

import numpy as np

from .arrhenius import R_J_PER_MOL_K

#: Largest change of the Arrhenius exponent over one quadrature cell [-].
MAX_EXPONENT_STEP = 0.05
#: Largest exponent change over one step of the reversible law (`refine_trace`) [-].
REVERSIBLE_EXPONENT_STEP = 0.0025
GL_NODES, GL_WEIGHTS = np.polynomial.legendre.leggauss(4)
GL_PAIRS = tuple(zip(GL_NODES.tolist(), GL_WEIGHTS.tolist(), strict=True))


def split_cells(t0, t1, T0, T1, ea, t_ref_k):
    """Split intervals whose exponent changes too much; returns cell arrays and owner index."""
    beta = ea / R_J_PER_MOL_K
    m = np.maximum(1, np.ceil(beta * np.abs(1.0 / T0 - 1.0 / T1) / MAX_EXPONENT_STEP)).astype(int)
    if np.all(m == 1):
        return t0, t1, T0, T1, None
    owner = np.repeat(np.arange(len(t0)), m)
    j = np.arange(len(owner)) - np.repeat(np.cumsum(m) - m, m)  # cell number within its interval
    frac0, frac1 = j / m[owner], (j + 1) / m[owner]
    dt, dT = (t1 - t0)[owner], (T1 - T0)[owner]
    return (
        t0[owner] + frac0 * dt,
        t0[owner] + frac1 * dt,
        T0[owner] + frac0 * dT,
        T0[owner] + frac1 * dT,
        (owner, len(t0)),
    )


def segment_integrals(t_s, T_K, ea_j_per_mol, t_ref_k):
    """Integrals over each interval between consecutive samples.

    Parameters
    ----------
    t_s : array_like
        Sample times, increasing [s].
    T_K : array_like
        Temperatures at those times [K].
    ea_j_per_mol : float
        Activation energy [J/mol].
    t_ref_k : float
        Reference temperature [K].

    Returns
    -------
    theta, s1, s2 : numpy.ndarray
        Per interval (length ``len(t_s) - 1``): ``int f ds`` [s], ``int f g ds``
        [s mol/J] and ``int f g^2 ds`` [s (mol/J)^2], with
        ``f = exp(Ea g)`` and ``g = -(1/T - 1/T_ref)/R``.

    Examples
    --------
    >>> th, _, _ = segment_integrals([0.0, 60.0], [343.15, 343.15], 65e3, 343.15)
    >>> float(th[0])
    60.0
    """
    t = np.asarray(t_s, dtype=float)
    T = np.asarray(T_K, dtype=float)
    if len(t) < 2:
        z = np.zeros(0)
        return z, z, z
    a, b, Ta, Tb, split = split_cells(t[:-1], t[1:], T[:-1], T[1:], ea_j_per_mol, t_ref_k)
    half = (b - a) / 2.0
    Tn = (Ta + Tb)[:, None] / 2.0 + ((Tb - Ta) / 2.0)[:, None] * GL_NODES[None, :]
    g = -(1.0 / Tn - 1.0 / t_ref_k) / R_J_PER_MOL_K
    fw = np.exp(ea_j_per_mol * g) * GL_WEIGHTS[None, :]
    theta = half * fw.sum(axis=1)
    s1 = half * (fw * g).sum(axis=1)
    s2 = half * (fw * g * g).sum(axis=1)
    if split is not None:
        owner, n = split
        theta, s1, s2 = (np.bincount(owner, v, minlength=n) for v in (theta, s1, s2))
    return theta, s1, s2


def reference_time(t_s, T_K, ea_j_per_mol, t_ref_k):
    """Cumulative reference-equivalent time ``Theta`` at each sample [s] (0 at the first).

    Examples
    --------
    >>> import numpy as np
    >>> reference_time([0, 10, 20], [343.15] * 3, 65e3, 343.15).tolist()
    [0.0, 10.0, 20.0]
    """
    theta, _, _ = segment_integrals(t_s, T_K, ea_j_per_mol, t_ref_k)
    return np.concatenate([[0.0], np.cumsum(theta)])
