"""Lab kinetics: Arrhenius regression and the classic isothermal methods.

Pure functions (SI units, no I/O, no clock):

* `fit_arrhenius` -- ordinary least squares of ``ln k`` on ``-(1/T - 1/T_ref)/R``
  with ``T_ref`` the harmonic mean temperature, where the estimates of ``ln k_ref``
  and ``Ea`` are uncorrelated (Schwaab, M. & Pinto, J. C., "Optimum reference
  temperature for reparameterization of the Arrhenius equation", Chem. Eng. Sci.
  62 (2007) 2750-2764, doi:10.1016/j.ces.2007.02.020).
* `fit_integral` and `fit_differential` -- the classic isothermal methods for
  ``-r_A = k C_A^n`` (Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999,
  ch. 3; Fogler, Elements of Chemical Reaction Engineering, 4th ed., 2006, ch. 5).

Standard errors are ``cov = s^2 (J^T J)^-1`` with ``s^2 = SSR/(m - p)`` at the
solution (Bard, Nonlinear Parameter Estimation, 1974, ch. 7); the pseudo-inverse
`pinv_cov` and the start grid of orders are shared with the joint plant fit of
`monitor.physics.plant_fit`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .arrhenius import R_J_PER_MOL_K
from .rate_laws import power_G, power_G_inv

#: Reaction orders tried for a start (integral method and the joint plant fit) [-].
ORDER_GRID = np.array([0.5, 1.0, 1.5, 2.0, 2.5, 3.0])


# ============================================================== Arrhenius regression
@dataclass(frozen=True)
class ArrheniusFit:
    """Result of `fit_arrhenius` (SI units)."""

    k_ref: float  # rate constant at t_ref_k [units of k]
    t_ref_k: float  # [K]
    ea_j_per_mol: float  # [J/mol]
    stderr_ln_k_ref: float  # [-]
    stderr_ea_j_per_mol: float  # [J/mol]
    correlation: float  # of ln k_ref and Ea [-]
    dof: int

    @property
    def stderr_k_ref(self) -> float:
        return self.k_ref * self.stderr_ln_k_ref


def fit_arrhenius(T_K, k, t_ref_k: float | None = None) -> ArrheniusFit:
    """Ordinary least-squares Arrhenius fit of rate constants against temperature.

    Parameters
    ----------
    T_K : array_like
        Temperatures [K] (at least two distinct).
    k : array_like
        Rate constants at those temperatures [any unit, positive].
    t_ref_k : float, optional
        Reference temperature [K]; default the harmonic mean of ``T_K``.

    Returns
    -------
    ArrheniusFit
        Standard errors need at least three points (else NaN).

    Notes
    -----
    ``ln k = ln k_ref + Ea g`` with ``g = -(1/T - 1/T_ref)/R``; at the harmonic
    mean ``sum(g) = 0`` and the two estimates are uncorrelated (Schwaab & Pinto 2007).

    Examples
    --------
    >>> f = fit_arrhenius([300.0, 320.0], [1.0, 10.0])
    >>> round(f.ea_j_per_mol / 1e3, 3)   # R ln(10) / (1/300 - 1/320)
    91.895
    """
    T = np.asarray(T_K, dtype=float)
    lnk = np.log(np.asarray(k, dtype=float))
    if len(T) < 2 or np.ptp(1.0 / T) == 0:
        raise ValueError("an Arrhenius fit needs at least two distinct temperatures")
    tr = float(len(T) / np.sum(1.0 / T)) if t_ref_k is None else float(t_ref_k)
    A = np.column_stack([np.ones_like(T), -(1.0 / T - 1.0 / tr) / R_J_PER_MOL_K])
    coef, *_ = np.linalg.lstsq(A, lnk, rcond=None)
    dof = len(T) - 2
    if dof > 0:
        s2 = float(np.sum((lnk - A @ coef) ** 2)) / dof
        cov = s2 * np.linalg.inv(A.T @ A)
        se = np.sqrt(np.diag(cov))
        corr = float(cov[0, 1] / (se[0] * se[1])) if se.all() else 0.0
    else:
        se, corr = np.array([math.nan, math.nan]), math.nan
    return ArrheniusFit(
        float(math.exp(coef[0])), tr, float(coef[1]), float(se[0]), float(se[1]), corr, dof
    )


# ============================================================== isothermal lab methods
@dataclass(frozen=True)
class IsothermalFit:
    """``-r_A = k C_A^n`` from one isothermal run.

    ``k`` is in s^-1 (L/mol)^(n-1) when times are in s and concentrations in mol/L.
    A fixed order has ``stderr_order = None``.
    """

    method: str
    k: float
    order: float
    stderr_k: float
    stderr_order: float | None
    correlation: float  # of ln k and n (0 when the order is fixed) [-]
    rmse: float  # of the fitted quantity (C for integral, ln rate for differential)
    n_points: int
    dof: int


def _cov_from_jac(J: np.ndarray, r: np.ndarray) -> tuple[np.ndarray, float, int]:
    """``s^2 (J^T J)^-1`` with ``s^2 = SSR/(m - p)``; singular directions get inf."""
    m, p = J.shape
    dof = m - p
    s2 = float(r @ r) / dof if dof > 0 else math.nan
    return s2 * pinv_cov(J), s2, dof


def pinv_cov(J: np.ndarray) -> np.ndarray:
    """``(J^T J)^-1``; a direction the data cannot see gets an infinite variance.

    Eigen-decomposition of the column-scaled normal matrix (small and symmetric:
    cheaper than an SVD of J and accurate enough for standard errors).
    """
    d = np.sqrt(np.einsum("ij,ij->j", J, J))
    d = np.where(d > 0, d, 1.0)
    Js = J / d
    w, v = np.linalg.eigh(Js.T @ Js)
    tiny = w <= max(w.max(initial=0.0), 0.0) * 1e-13
    inv = np.where(tiny, 0.0, 1.0 / np.where(tiny, 1.0, w))
    cov = (v * inv) @ v.T / np.outer(d, d)
    if tiny.any():
        # the parameters the null space touches: their variance is unbounded
        touched = np.any(np.abs(v[:, tiny]) > 1e-6, axis=1)
        cov[touched, :] = np.nan
        cov[:, touched] = np.nan
        cov[touched, touched] = np.inf
    return cov


def fit_integral(t_s, c, c0: float | None = None, order: float | None = None) -> IsothermalFit:
    """Integral method: nonlinear least squares on the integrated isothermal rate law.

    Parameters
    ----------
    t_s : array_like
        Times since the start [s].
    c : array_like
        Concentrations of A at those times [mol/L].
    c0 : float, optional
        Initial concentration [mol/L]; default the measurement at ``t = 0``
        (which then defines ``C_A0`` and is left out of the residuals).
    order : float, optional
        Fixed reaction order ``n``; ``None`` fits it.

    Returns
    -------
    IsothermalFit

    Notes
    -----
    ``C(t) = C_A0 [1 - G^-1(k C_A0^(n-1) t)]`` with the power-law ``G`` of
    `monitor.physics.rate_laws` (Levenspiel 1999, eqs. 3.12 and 3.29), so any
    order, including ``n = 1``, is one smooth model. Unweighted residuals in C.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.array([0.0, 10.0, 20.0, 40.0])
    >>> f = fit_integral(t, 2.0 * np.exp(-0.05 * t), order=1.0)
    >>> round(f.k, 6)
    0.05
    """
    t = np.asarray(t_s, dtype=float)
    c = np.asarray(c, dtype=float)
    if c0 is None:
        at0 = t == 0
        if not at0.any():
            raise ValueError("give c0 or a measurement at t = 0")
        c0 = float(np.mean(c[at0]))
        t, c = t[~at0], c[~at0]
    free = order is None
    if len(t) < (2 if free else 1):
        raise ValueError("too few points for the integral method")

    def model(p):
        n = p[1] if free else order
        return c0 * (1.0 - power_G_inv(np.exp(p[0]) * c0 ** (n - 1.0) * t, n))

    def resid(p):
        return model(p) - c

    # linearised start: G(X) = k C_A0^(n-1) t through the origin, for a few orders
    X = np.clip(1.0 - c / c0, 1e-6, 1 - 1e-6)
    best = None
    for n in ORDER_GRID if free else [order]:
        g = power_G(X, n)
        k = float(np.sum(g * t) / np.sum(t * t)) / c0 ** (n - 1.0)
        p = (
            np.array([math.log(max(k, 1e-300)), n])
            if free
            else np.array([math.log(max(k, 1e-300))])
        )
        ssr = float(np.sum(resid(p) ** 2))
        if best is None or ssr < best[0]:
            best = (ssr, p)
    bounds = ([-np.inf, 0.0], [np.inf, 6.0]) if free else (-np.inf, np.inf)
    sol = least_squares(
        resid,
        best[1],
        bounds=bounds,
        jac="3-point",
        x_scale="jac",
        ftol=1e-12,
        xtol=1e-12,
        gtol=1e-12,
    )
    cov, _, dof = _cov_from_jac(sol.jac, sol.fun)
    se = np.sqrt(np.abs(np.diag(cov)))
    k = float(math.exp(sol.x[0]))
    corr = float(cov[0, 1] / (se[0] * se[1])) if free and se.all() else 0.0
    return IsothermalFit(
        "integral",
        k,
        float(sol.x[1]) if free else float(order),
        k * float(se[0]),
        float(se[1]) if free else None,
        corr,
        float(np.sqrt(np.mean(sol.fun**2))),
        len(t),
        dof,
    )


def fit_differential(t_s, c, method: str = "polynomial", degree: int = 3) -> IsothermalFit:
    """Differential method: ``ln(-dC/dt) = ln k + n ln C`` by ordinary least squares.

    Parameters
    ----------
    t_s : array_like
        Times [s], increasing.
    c : array_like
        Concentrations of A [mol/L].
    method : {"polynomial", "interval"}
        How ``-dC/dt`` is estimated: ``"polynomial"`` differentiates a least-squares
        polynomial of ``ln C`` in ``t`` of the given degree (a smooth curve through the
        data, as the graphical method draws one: Levenspiel 1999, sec. 3.2);
        ``"interval"`` takes ``-ΔC/Δt`` of each interval against the interval's mean
        concentration (finite differences: Fogler 2006, sec. 5.2).
    degree : int
        Degree of the polynomial (``method="polynomial"``).

    Returns
    -------
    IsothermalFit
        ``rmse`` is that of ``ln(-dC/dt)``.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.linspace(0.0, 100.0, 41)
    >>> f = fit_differential(t, 1.0 / (1.0 + 0.01 * t), degree=4)   # second order, k = 0.01
    >>> round(f.order, 2), round(f.k, 4)
    (2.0, 0.01)
    """
    t = np.asarray(t_s, dtype=float)
    c = np.asarray(c, dtype=float)
    if method == "interval":
        rate = -np.diff(c) / np.diff(t)
        conc = (c[1:] + c[:-1]) / 2.0
    elif method == "polynomial":
        if len(t) < degree + 2:
            raise ValueError(f"a degree-{degree} polynomial needs at least {degree + 2} points")
        poly = np.polynomial.Polynomial.fit(t, np.log(c), degree)
        rate = -poly.deriv()(t) * c
        conc = c
    else:
        raise ValueError(f"unknown method {method!r}; expected 'polynomial' or 'interval'")
    ok = (rate > 0) & (conc > 0)
    if ok.sum() < 3:
        raise ValueError("fewer than three positive rates: cannot fit ln rate against ln C")
    A = np.column_stack([np.ones(ok.sum()), np.log(conc[ok])])
    y = np.log(rate[ok])
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    r = y - A @ coef
    cov, _, dof = _cov_from_jac(A, r)
    se = np.sqrt(np.diag(cov))
    k = float(math.exp(coef[0]))
    return IsothermalFit(
        f"differential ({method})",
        k,
        float(coef[1]),
        k * float(se[0]),
        float(se[1]),
        float(cov[0, 1] / (se[0] * se[1])),
        float(np.sqrt(np.mean(r**2))),
        int(ok.sum()),
        dof,
    )


__all__ = ["ArrheniusFit", "IsothermalFit", "fit_arrhenius", "fit_differential", "fit_integral"]
