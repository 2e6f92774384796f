"""Rate laws in conversion form for a batch reactor.

The batch mole balance of the limiting reactant A, ``N_A0 dX/dt = (-r_A) V``,
with ``C_A = C_A0 (1 - X)`` at constant volume gives ``dX/dt = (-r_A)/C_A0``
(Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999, ch. 3; Fogler,
Elements of Chemical Reaction Engineering, 4th ed., 2006, eq. 2-6). For the
laws here the rate factors as

    dX/dt = alpha * k(T) * s(C_A0) * h(X)

with ``alpha`` the batch's activity, ``s`` a charge-dependent scale and ``h`` the
conversion dependence. Such a law *separates*: with ``G(X) = int_0^X dX'/h(X')``
and the reference-equivalent time ``Theta`` (see `monitor.physics.trace`),
``G(X) = alpha * k_ref * s * Theta``.

Closed forms of ``G`` and ``G^-1`` are written with ``log1p``/``expm1`` and the
relative functions ``exprel(u) = expm1(u)/u`` and ``log1prel(v) = log1p(v)/v`` so
the limits n -> 1 (power law) and Theta_B -> b (stoichiometric feed) are exact
and free of cancellation. The variable-volume option ``V = V0 (1 + eps X)``
(Levenspiel eq. 3.72) keeps the law separable; its ``G`` is tabulated by
Gauss-Legendre quadrature.

Concentrations are in mol/L, times in s, ``k_ref`` in s^-1 (L/mol)^(order-1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import exprel

LAWS = ("power", "bimolecular", "autocatalytic", "reversible")


def log1prel(v):
    """``log1p(v)/v`` with its limit 1 at ``v = 0`` [-].

    Examples
    --------
    >>> float(log1prel(0.0))
    1.0
    """
    v = np.asarray(v, dtype=float)
    small = np.abs(v) < 1e-8
    safe = np.where(small, 1.0, v)
    out = np.where(small, 1.0 - v / 2.0 + v * v / 3.0, np.log1p(safe) / safe)
    return out if out.ndim else float(out)


@dataclass(frozen=True)
class SeparableLaw:
    """A law with ``dX/dt = alpha k(T) s h(X)``; the base for the closed forms.

    Subclasses implement `h`, `G` and `G_inv`; `x_max` is the conversion reached
    as ``G -> inf`` (1, or the limit set by a short co-reactant).
    """

    epsilon: float = 0.0

    separable = True

    def h(self, X):
        raise NotImplementedError

    def G(self, X):
        raise NotImplementedError

    def G_inv(self, y):
        raise NotImplementedError

    def scale(self, c_a0_mol_per_l: float) -> float:
        raise NotImplementedError

    @property
    def x_max(self) -> float:
        return 1.0

    def dxdt(self, X, k, c_a0_mol_per_l, alpha=1.0):
        """Conversion rate [1/s] at rate constant ``k``."""
        return alpha * k * self.scale(c_a0_mol_per_l) * self.h(X)


@dataclass(frozen=True)
class PowerLaw(SeparableLaw):
    """``-r_A = k C_A^n``; ``dX/dt = k C_A0^(n-1) (1-X)^n`` at constant volume.

    ``G(X) = [(1-X)^(1-n) - 1]/(n-1)``, and ``-ln(1-X)`` at ``n = 1``
    (Levenspiel 1999, eqs. 3.12 and 3.29).

    Examples
    --------
    >>> law = PowerLaw(order=2.0)
    >>> round(float(law.G(0.9)), 12)   # X/(1-X)
    9.0
    >>> round(float(law.G_inv(9.0)), 12)
    0.9
    """

    order: float = 1.0

    def scale(self, c_a0_mol_per_l):
        return c_a0_mol_per_l ** (self.order - 1.0)

    def h(self, X):
        X = np.asarray(X, dtype=float)
        return (1.0 - X) ** self.order / (1.0 + self.epsilon * X) ** (self.order - 1.0)

    @property
    def x_max(self):
        return 1.0

    def G(self, X):
        if self.epsilon:
            return _tabulated(self).G(X)
        return power_G(X, self.order)

    def G_inv(self, y):
        if self.epsilon:
            return _tabulated(self).G_inv(y)
        return power_G_inv(y, self.order)


def power_G(X, order):
    """``G(X)`` of the power law; ``order`` may be an array (broadcasts) [-]."""
    order = np.asarray(order, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        L = np.log1p(-np.asarray(X, dtype=float))  # ln(1-X) <= 0
        out = -L * exprel((1.0 - order) * L)
    # orders below 1 reach X = 1 at the finite G = 1/(1-n) (inf * 0 above)
    below = order < 1.0
    out = np.where(np.isneginf(L) & below, 1.0 / np.where(below, 1.0 - order, 1.0), out)
    return out if np.ndim(out) else float(out)


def power_G_inv(y, order):
    """Inverse of `power_G`; orders below 1 reach X = 1 at ``G = 1/(1-n)`` [-]."""
    if isinstance(y, float) and isinstance(order, float):  # the per-poll scalar case
        v = (order - 1.0) * y
        if v <= -1.0:
            return 1.0
        rel = math.log1p(v) / v if abs(v) >= 1e-8 else 1.0 - v / 2.0 + v * v / 3.0
        return -math.expm1(-y * rel)
    y = np.asarray(y, dtype=float)
    v = (np.asarray(order, dtype=float) - 1.0) * y
    done = v <= -1.0
    X = -np.expm1(-y * log1prel(np.where(done, -0.5, v)))
    out = np.where(done, 1.0, X)
    return out if np.ndim(out) else float(out)


@dataclass(frozen=True)
class BimolecularLaw(SeparableLaw):
    """``-r_A = k C_A C_B`` for A + bB with ``C_B = C_A0 (Theta_B - b X)``.

    With ``M = Theta_B/b`` and ``z = X/(M(1-X))``:
    ``G(X) = (z/b) log1prel((M-1) z) = ln[(M-X)/(M(1-X))]/(b(M-1))``
    (Levenspiel 1999, eq. 3.13), and ``X/(b(1-X))`` at ``M = 1``.
    When B is short (``M < 1``) conversion of A tends to ``M``.

    Examples
    --------
    >>> law = BimolecularLaw(theta_b=1.0, b=1.0)
    >>> round(float(law.G(0.9)), 12)   # stoichiometric: X/(1-X)
    9.0
    """

    theta_b: float = 1.0
    b: float = 1.0

    def scale(self, c_a0_mol_per_l):
        return c_a0_mol_per_l

    @property
    def M(self) -> float:
        return self.theta_b / self.b

    def h(self, X):
        X = np.asarray(X, dtype=float)
        return (1.0 - X) * (self.theta_b - self.b * X) / (1.0 + self.epsilon * X)

    @property
    def x_max(self):
        return min(1.0, self.M)

    def G(self, X):
        if self.epsilon:
            return _tabulated(self).G(X)
        X = np.asarray(X, dtype=float)
        M = self.M
        z = X / (M * (1.0 - X))
        return (z / self.b) * log1prel((M - 1.0) * z)

    def G_inv(self, y):
        if self.epsilon:
            return _tabulated(self).G_inv(y)
        y = np.asarray(y, dtype=float)
        M = self.M
        w = self.b * y
        z = w * exprel((M - 1.0) * w)
        out = M * z / (1.0 + M * z)
        out = np.where(np.isinf(z), 1.0, out)
        return out if out.ndim else float(out)


@dataclass(frozen=True)
class AutocatalyticLaw(SeparableLaw):
    """``-r_A = k C_A C_R`` for A + R -> 2R with ``C_R = C_A0 (Theta_R + X)``.

    ``G(X) = ln[(Theta_R + X)/(Theta_R (1-X))]/(1 + Theta_R)``
    (Levenspiel 1999, eq. 3.41).

    Examples
    --------
    >>> law = AutocatalyticLaw(theta_r=0.01)
    >>> round(float(law.G_inv(law.G(0.5))), 12)
    0.5
    """

    theta_r: float = 0.01

    def scale(self, c_a0_mol_per_l):
        return c_a0_mol_per_l

    def h(self, X):
        X = np.asarray(X, dtype=float)
        return (1.0 - X) * (self.theta_r + X) / (1.0 + self.epsilon * X)

    def G(self, X):
        if self.epsilon:
            return _tabulated(self).G(X)
        X = np.asarray(X, dtype=float)
        th = self.theta_r
        return (np.log1p(X / th) - np.log1p(-X)) / (1.0 + th)

    def G_inv(self, y):
        if self.epsilon:
            return _tabulated(self).G_inv(y)
        u = (1.0 + self.theta_r) * np.asarray(y, dtype=float)
        th = self.theta_r
        e = np.exp(-u)
        out = th * (-np.expm1(-u)) / (e + th)
        return out if out.ndim else float(out)


@dataclass(frozen=True)
class ReversibleLaw:
    """First-order reversible A <-> R: ``-r_A = k (C_A - C_R/K_c(T))``.

    ``dX/dt = k [(1 - X) - (Theta_R + X)/K_c]`` (Levenspiel 1999, eq. 3.53), with
    ``K_c`` from the van 't Hoff equation. Not separable when ``K_c`` varies with
    temperature; it is linear in X, which `monitor.physics.trace` integrates
    exactly per sample interval. Equilibrium ``X_e = (K_c - Theta_R)/(K_c + 1)``.
    """

    theta_r: float = 0.0
    k_eq_ref: float = 10.0
    dh_rxn_j_per_mol: float = 0.0
    epsilon: float = 0.0

    separable = False

    def scale(self, c_a0_mol_per_l):
        return 1.0

    def x_eq(self, K_c):
        K_c = np.asarray(K_c, dtype=float)
        return (K_c - self.theta_r) / (K_c + 1.0)

    def dxdt(self, X, k, K_c, alpha=1.0):
        return alpha * k * ((1.0 - X) - (self.theta_r + X) / K_c)


class _Table:
    """``G`` for the variable-volume option, as a ratio to the constant-volume closed form.

    ``r(u) = G_eps(X)/G_0(X)`` is smooth and bounded in ``u = -ln(1 - X/x_max)``, so a
    cubic spline of it on a grid keeps full relative accuracy up to complete conversion;
    each cell of ``G_eps`` is integrated by 8-point Gauss-Legendre quadrature. The inverse
    brackets ``y`` between nodes and refines by safeguarded Newton steps (``dG/dX = 1/h``).
    """

    def __init__(self, law: SeparableLaw, n: int = 1500, u_end: float = 25.0):
        from dataclasses import replace

        from scipy.interpolate import CubicSpline

        self.law, self.base = law, replace(law, epsilon=0.0)
        self.x_max = law.x_max
        # uniform in u, and geometric towards X = 0 too, where h can vary on the scale of
        # a small seed (autocatalytic theta_r): cells must be short against it
        u = np.union1d(np.linspace(0.0, u_end, n), np.geomspace(1e-9, u_end, n // 2))
        X = self.x_max * -np.expm1(-u)
        nodes, weights = np.polynomial.legendre.leggauss(8)
        a, b = X[:-1], X[1:]
        mid, half = (a + b) / 2, (b - a) / 2
        pts = mid[:, None] + half[:, None] * nodes[None, :]
        G = np.concatenate([[0.0], np.cumsum(half * (weights[None, :] / law.h(pts)).sum(axis=1))])
        G0 = self.base.G(X)
        ratio = np.empty_like(G)
        ratio[1:] = G[1:] / G0[1:]
        ratio[0] = 1.0  # h_eps(0) = h_0(0), so the ratio tends to 1 at X = 0
        self._ratio = CubicSpline(u, ratio)
        self.u_end = u_end
        self._X_nodes, self._G_nodes = X, G

    def _u(self, X):
        return -np.log1p(-np.minimum(X / self.x_max, 1.0 - 1e-16))

    def G(self, X):
        X = np.asarray(X, dtype=float)
        u = np.minimum(self._u(X), self.u_end)
        out = self._ratio(u) * self.base.G(X)
        return out if out.ndim else float(out)

    def G_inv(self, y):
        # Bracket y between table nodes (G increases with X), then Newton steps kept
        # inside the bracket (bisection otherwise): plain Newton from the constant-volume
        # guess can overshoot to X ~ x_max, where h ~ 0 stalls it or G is not finite.
        y = np.asarray(y, dtype=float)
        Xn, Gn = self._X_nodes, self._G_nodes
        i = np.clip(np.searchsorted(Gn, y) - 1, 0, len(Gn) - 2)
        lo, hi = Xn[i], Xn[i + 1]
        X = lo + (hi - lo) * np.clip((y - Gn[i]) / (Gn[i + 1] - Gn[i]), 0.0, 1.0)
        for _ in range(100):
            g = self.G(X) - y
            if np.all(np.abs(g) <= 1e-13 * np.maximum(np.abs(y), 1e-300)):
                break
            lo = np.where(g <= 0, X, lo)
            hi = np.where(g >= 0, X, hi)
            step = X - g * self.law.h(X)
            X = np.where((step > lo) & (step < hi), step, (lo + hi) / 2)
        # beyond the table (u > u_end) the ratio is constant to within rounding
        far = y >= Gn[-1]
        if np.any(far):
            X_far = np.minimum(self.base.G_inv(y / float(self._ratio(self.u_end))), self.x_max)
            X = np.where(far, X_far, X)
        return X if X.ndim else float(X)


_TABLES: dict = {}


def _tabulated(law: SeparableLaw) -> _Table:
    if law not in _TABLES:
        _TABLES[law] = _Table(law)
    return _TABLES[law]


def make_law(
    rate_law: str,
    *,
    order: float = 1.0,
    theta_b: float | None = None,
    b: float = 1.0,
    theta_r: float = 0.0,
    k_eq_ref: float | None = None,
    dh_rxn_j_per_mol: float = 0.0,
    epsilon: float = 0.0,
):
    """Build a rate-law object by name (one of `LAWS`)."""
    if rate_law == "power":
        return PowerLaw(epsilon=epsilon, order=order)
    if rate_law == "bimolecular":
        if theta_b is None:
            raise ValueError("bimolecular law needs theta_b")
        return BimolecularLaw(epsilon=epsilon, theta_b=theta_b, b=b)
    if rate_law == "autocatalytic":
        if not theta_r > 0:
            raise ValueError("autocatalytic law needs theta_r > 0 (some product present)")
        return AutocatalyticLaw(epsilon=epsilon, theta_r=theta_r)
    if rate_law == "reversible":
        if k_eq_ref is None:
            raise ValueError("reversible law needs k_eq_ref")
        return ReversibleLaw(
            theta_r=theta_r, k_eq_ref=k_eq_ref, dh_rxn_j_per_mol=dh_rxn_j_per_mol, epsilon=epsilon
        )
    raise ValueError(f"unknown rate law {rate_law!r}; expected one of {LAWS}")


__all__ = [
    "LAWS",
    "PowerLaw",
    "BimolecularLaw",
    "AutocatalyticLaw",
    "ReversibleLaw",
    "SeparableLaw",
    "make_law",
    "log1prel",
    "power_G",
    "power_G_inv",
]
