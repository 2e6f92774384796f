"""Rate laws: closed forms, published worked examples, limits, variable volume, inverses.

Convention under test (monitor.physics.rate_laws): ``dX/dt = alpha k(T) s(C_A0) h(X)``,
``G(X) = int_0^X dX'/h(X')``, so at constant temperature ``t = G(X)/(alpha k s)``.
Concentrations mol/L, k in s^-1 (L/mol)^(n-1).
"""

from __future__ import annotations

import math
from decimal import Decimal, localcontext

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.integrate import quad

from monitor.physics.rate_laws import (
    AutocatalyticLaw,
    BimolecularLaw,
    PowerLaw,
    ReversibleLaw,
    make_law,
    power_G,
    power_G_inv,
)


def batch_time_s(law, X, k, c_a0_mol_per_l, alpha=1.0):
    """Isothermal batch time to conversion X from the separated form ``G = alpha k s t``."""
    return law.G(X) / (alpha * k * law.scale(c_a0_mol_per_l))


def d(x: float) -> Decimal:
    """The exact value of a double as a Decimal (no rounding on the way in)."""
    return Decimal(float(x))


# ---------------------------------------------------------------------------
# Closed forms of the isothermal constant-volume batch (Levenspiel, Chemical Reaction
# Engineering, 3rd ed., Wiley 1999, ch. 3, integrated first, second and n-th order
# forms; equation numbers from memory, so only the chapter is cited).


@pytest.mark.parametrize("X", [0.1, 0.5, 0.9, 0.999, 1 - 1e-9])
def test_first_order_time_is_ln_one_over_one_minus_x(X):
    # t = ln(1/(1-X))/k (Levenspiel 1999, ch. 3, from memory)
    k = 2.7e-4
    t = batch_time_s(PowerLaw(order=1.0), X, k, 1.3)
    assert_allclose(t, math.log(1.0 / (1.0 - X)) / k, rtol=1e-14)


def test_second_order_worked_number_k_ca0_one_per_hour():
    # t = X/(k C_A0 (1-X)); with k C_A0 = 1 h^-1 and X = 0.9 the time is 9.00 h
    # (closed form, Levenspiel 1999, ch. 3, from memory; the number is arithmetic).
    c_a0 = 2.0
    k = 1.0 / 3600.0 / c_a0  # L/(mol s), so that k C_A0 = 1 h^-1
    t_h = batch_time_s(PowerLaw(order=2.0), 0.9, k, c_a0) / 3600.0
    assert round(t_h, 2) == 9.00
    assert_allclose(t_h, 0.9 / (1.0 * 0.1), rtol=1e-13)


@pytest.mark.parametrize("n", [0.5, 1.5, 2.0, 2.5, 3.0])
@pytest.mark.parametrize("X", [0.05, 0.5, 0.9, 0.99])
def test_nth_order_closed_form(n, X):
    # t = [(1-X)^(1-n) - 1]/((n-1) k C_A0^(n-1))  (Levenspiel 1999, ch. 3, from memory)
    k, c_a0 = 3.1e-4, 1.7
    expected = ((1.0 - X) ** (1.0 - n) - 1.0) / ((n - 1.0) * k * c_a0 ** (n - 1.0))
    assert_allclose(batch_time_s(PowerLaw(order=n), X, k, c_a0), expected, rtol=1e-12)


@pytest.mark.parametrize("n", [0.5, 1.0, 2.0, 2.7])
def test_separated_form_matches_the_integral_form_of_the_mole_balance(n):
    # t = C_A0 int_0^X dX / (-r_A) with -r_A = k C_A^n, C_A = C_A0 (1-X): the design
    # equation of the constant-volume batch, integrated by scipy quad.
    k, c_a0, X = 4e-4, 1.8, 0.93
    t_quad, _ = quad(
        lambda x: c_a0 / (k * (c_a0 * (1 - x)) ** n), 0.0, X, epsabs=0, epsrel=1e-13, limit=200
    )
    assert_allclose(batch_time_s(PowerLaw(order=n), X, k, c_a0), t_quad, rtol=1e-11)


def test_order_below_one_completes_in_finite_time():
    # n < 1: X = 1 is reached at t = C_A0^(1-n)/((1-n) k) (Levenspiel 1999, ch. 3, n < 1
    # discussion, from memory); G(1) = 1/(1-n) and G_inv saturates at 1.
    n = 0.5
    assert power_G(1.0, n) == pytest.approx(2.0, rel=1e-15)
    assert power_G_inv(2.0, n) == 1.0
    assert power_G_inv(5.0, n) == 1.0
    assert PowerLaw(order=n).G_inv(PowerLaw(order=n).G(1.0)) == 1.0


# ---------------------------------------------------------------------------
# Published worked examples


def test_levenspiel_example_3_1_order_1_4():
    # Levenspiel, Chemical Reaction Engineering, 3rd ed. (1999), Example 3.1 (from
    # memory, as cited in the project brief; not checked against the printed page):
    # -r_A = 0.005 C_A^1.4 mol/(L s), C_A0 = 10 mol/L; time to X = 0.8 is about 180 s
    # (179.9 s by the integral form).
    n, k, c_a0, X = 1.4, 0.005, 10.0, 0.8
    t = batch_time_s(PowerLaw(order=n), X, k, c_a0)
    assert round(t) == 180  # the book's rounded figure
    assert round(t, 1) == 179.9  # the integral form to the printed decimal
    # and the design equation t = C_A0 int_0^X dX/(-r_A), scipy quad
    t_quad, _ = quad(lambda x: c_a0 / (k * (c_a0 * (1.0 - x)) ** n), 0.0, X, epsabs=0, epsrel=1e-13)
    assert_allclose(t, t_quad, rtol=1e-12)


def test_fogler_example_4_1_first_order_t90():
    # Fogler, Elements of Chemical Reaction Engineering, 4th ed. (2006), Example 4-1,
    # first-order hydrolysis with k = 0.311 min^-1 (from memory): t_90 = ln 10 / k.
    k = 0.311 / 60.0  # s^-1
    t90_min = batch_time_s(PowerLaw(order=1.0), 0.9, k, 1.0) / 60.0
    assert_allclose(t90_min, math.log(10.0) / 0.311, rtol=1e-14)
    assert round(t90_min, 2) == 7.40


# ---------------------------------------------------------------------------
# Limits that must be free of cancellation


def _bimolecular_G_exact(X: float, theta_b: float, b: float) -> float:
    """ln[(M-X)/(M(1-X))]/(b(M-1)) in 60-digit decimal arithmetic (M = theta_b/b in
    double, as the code forms it, then exact)."""
    M = theta_b / b
    with localcontext() as ctx:
        ctx.prec = 60
        Md, Xd = d(M), d(X)
        return float(((Md - Xd) / (Md * (1 - Xd))).ln() / (d(b) * (Md - 1)))


@pytest.mark.parametrize("b", [1.0, 2.0])
@pytest.mark.parametrize("sign", [+1, -1])
@pytest.mark.parametrize("X", [0.1, 0.5, 0.9, 0.99])
def test_bimolecular_near_stoichiometric_feed(b, sign, X):
    # Theta_B -> b: G -> X/(b(1-X)), the stoichiometric second-order form (Levenspiel
    # 1999, ch. 3, from memory). At Theta_B = b(1 +- 1e-9) the naive formula loses ~1e-7
    # to cancellation; the code must match the exact value to far better than 1e-9.
    theta_b = b * (1.0 + sign * 1e-9)
    law = BimolecularLaw(theta_b=theta_b, b=b)
    exact = _bimolecular_G_exact(X, theta_b, b)
    assert_allclose(law.G(X), exact, rtol=1e-13)
    # the limit itself: G = (z/b)(1 - (M-1) z/2 + ...) with z = X/(M(1-X)), so G lies
    # within about 1e-9 (1 + z/2) of the stoichiometric form
    z = X / (1.0 - X)
    assert_allclose(law.G(X), X / (b * (1.0 - X)), rtol=1.1e-9 * (1.0 + z / 2.0))
    assert_allclose(BimolecularLaw(theta_b=b, b=b).G(X), X / (b * (1.0 - X)), rtol=1e-15)
    assert_allclose(law.G_inv(exact), X, rtol=1e-13)
    # the check can fail: the naive double-precision formula is off by far more than 1e-9
    M = theta_b / b
    naive = math.log((M - X) / (M * (1.0 - X))) / (b * (M - 1.0))
    assert abs(naive / exact - 1.0) > 1e-12


@pytest.mark.parametrize("theta_b,b", [(0.8, 1.0), (1.2, 2.0), (0.3, 1.0)])
def test_bimolecular_short_co_reactant_tends_to_theta_b_over_b(theta_b, b):
    # B-limited (Theta_B < b): conversion of A tends to Theta_B/b as t -> infinity
    # (stoichiometry: B is used up; Levenspiel 1999, ch. 3, from memory).
    law = BimolecularLaw(theta_b=theta_b, b=b)
    M = theta_b / b
    assert law.x_max == M
    X_late = law.G_inv(np.array([1e2, 1e4, 1e8]) / b)
    assert np.all(np.diff(X_late) >= 0)
    assert_allclose(X_late[-1], M, rtol=1e-14)
    assert np.all(X_late <= M)
    # against the closed form solved for X: (M - X)/(M (1 - X)) = e = exp(b (M - 1) y)
    # gives X = M (1 - e)/(1 - M e)
    for y in (0.01, 0.7, 5.0):
        e = math.exp(b * (M - 1.0) * y)
        assert_allclose(law.G_inv(y), M * (1.0 - e) / (1.0 - M * e), rtol=1e-13)


def _power_G_exact(X: float, n: float) -> float:
    with localcontext() as ctx:
        ctx.prec = 60
        one_minus = 1 - d(X)
        e = 1 - d(n)
        return float(((e * one_minus.ln()).exp() - 1) / (d(n) - 1))


@pytest.mark.parametrize("n", [1.0 + 1e-9, 1.0 - 1e-9])
@pytest.mark.parametrize("X", [1e-6, 0.3, 0.9, 0.999999])
def test_power_law_near_first_order(n, X):
    # n -> 1: [(1-X)^(1-n) - 1]/(n-1) -> -ln(1-X) (Levenspiel 1999, ch. 3, from memory),
    # checked at n = 1 +- 1e-9 against 60-digit decimal arithmetic.
    G = power_G(X, n)
    assert_allclose(G, _power_G_exact(X, n), rtol=1e-13)
    assert_allclose(G, -math.log1p(-X), rtol=1e-7)
    assert_allclose(power_G_inv(G, n), X, rtol=1e-13)


# ---------------------------------------------------------------------------
# Variable volume V = V0 (1 + eps X)


@pytest.mark.parametrize("eps", [-0.5, 0.5, 2.0])
def test_first_order_is_independent_of_epsilon(eps):
    # For a first-order reaction in a variable-volume batch -ln(1-X) = k t, whatever
    # eps (Levenspiel 1999, ch. 3, variable-volume batch, from memory).
    X = np.array([1e-6, 0.2, 0.7, 0.99, 0.999999])
    law = PowerLaw(order=1.0, epsilon=eps)
    assert_allclose(law.G(X), -np.log1p(-X), rtol=1e-11)
    assert_allclose(law.G_inv(-np.log1p(-X)), X, rtol=1e-12)


@pytest.mark.parametrize("eps", [-0.5, 0.7, 2.0])
@pytest.mark.parametrize("X", [0.05, 0.5, 0.9, 0.999])
def test_second_order_with_epsilon_against_quad(eps, X):
    # k C_A0 t = int_0^X (1 + eps X)/(1 - X)^2 dX (second order, V = V0(1 + eps X);
    # Levenspiel 1999, ch. 3, from memory), by scipy quad and by its antiderivative
    # (1 + eps) X/(1 - X) + eps ln(1 - X) (worked by hand).
    G = PowerLaw(order=2.0, epsilon=eps).G(X)
    ref, _ = quad(lambda x: (1 + eps * x) / (1 - x) ** 2, 0.0, X, epsabs=0, epsrel=1e-13, limit=200)
    assert_allclose(G, ref, rtol=1e-10)
    assert_allclose(G, (1 + eps) * X / (1 - X) + eps * math.log1p(-X), rtol=1e-10)


@pytest.mark.parametrize(
    "law,integrand",
    [
        (
            BimolecularLaw(theta_b=1.6, b=2.0, epsilon=0.4),
            lambda x: (1 + 0.4 * x) / ((1 - x) * (1.6 - 2.0 * x)),
        ),
        (
            AutocatalyticLaw(theta_r=0.05, epsilon=-0.3),
            lambda x: (1 - 0.3 * x) / ((1 - x) * (0.05 + x)),
        ),
        (PowerLaw(order=1.5, epsilon=1.0), lambda x: (1 + x) ** 0.5 / (1 - x) ** 1.5),
    ],
)
def test_variable_volume_G_against_quad(law, integrand):
    # G = int_0^X dX/h with h from the rate written in C_A = C_A0 (1-X)/(1+eps X) etc.;
    # the integrand is written out here independently of the code's h.
    for frac in (0.1, 0.5, 0.9, 0.99):
        X = frac * law.x_max
        ref, _ = quad(integrand, 0.0, X, epsabs=0, epsrel=1e-13, limit=200)
        assert_allclose(law.G(X), ref, rtol=1e-10)


@pytest.mark.parametrize("theta_r", [1e-4, 1e-3, 0.01, 0.5])
@pytest.mark.parametrize("eps", [-0.5, 0.5, 2.0])
def test_autocatalytic_with_epsilon_against_partial_fractions(theta_r, eps):
    # int_0^X (1 + eps x)/((1 - x)(theta_r + x)) dx
    #   = -(1 + eps)/(1 + theta_r) ln(1 - X) + (1 - eps theta_r)/(1 + theta_r) ln(1 + X/theta_r)
    # (partial fractions, worked by hand). A small seed makes h steep near X = 0; the
    # table once lost 5e-4 relative there at theta_r = 1e-3.
    X = np.concatenate([np.geomspace(1e-9, 0.3, 40), np.linspace(0.3, 0.999999, 40)])
    exact = (-(1 + eps) * np.log1p(-X) + (1 - eps * theta_r) * np.log1p(X / theta_r)) / (
        1 + theta_r
    )
    law = AutocatalyticLaw(theta_r=theta_r, epsilon=eps)
    assert_allclose(law.G(X), exact, rtol=1e-9)
    assert_allclose(law.G_inv(exact), X, rtol=1e-9)


# ---------------------------------------------------------------------------
# G^-1(G(X)) = X over each law's domain (property test)

_eps = st.one_of(st.just(0.0), st.floats(-0.5, 2.0))


@st.composite
def separable_laws(draw):
    kind = draw(st.sampled_from(["power", "bimolecular", "autocatalytic"]))
    eps = draw(_eps)
    if kind == "power":
        return PowerLaw(order=draw(st.floats(0.2, 3.0)), epsilon=eps)
    if kind == "bimolecular":
        b = draw(st.sampled_from([0.5, 1.0, 2.0]))
        return BimolecularLaw(theta_b=b * draw(st.floats(0.2, 5.0)), b=b, epsilon=eps)
    return AutocatalyticLaw(theta_r=draw(st.floats(1e-4, 3.0)), epsilon=eps)


# a fraction of x_max: uniform, or clustered towards x_max (1 - e^-v, v up to 28)
_fraction = st.one_of(st.floats(0.0, 1.0), st.floats(0.0, 28.0).map(lambda v: -math.expm1(-v)))


def conversion(law, frac: float) -> float:
    """A conversion in the law's domain: [0, 1] for orders below 1 (X = 1 is reached at
    finite G), else [0, x_max) with x_max excluded (G = inf there)."""
    X = frac * law.x_max
    if isinstance(law, PowerLaw) and law.order < 1:
        return X
    return min(X, law.x_max * (1.0 - 1e-12))


@settings(max_examples=150, deadline=None)
@given(separable_laws(), _fraction)
def test_G_inverse_round_trip(law, frac):
    X = conversion(law, frac)
    G = law.G(X)
    assert np.isfinite(G) and G >= 0
    Xr = law.G_inv(G)
    assert abs(Xr - X) <= 1e-12 * X + 4.5e-16, (law, X, Xr)


@settings(max_examples=60, deadline=None)
@given(separable_laws(), _fraction, _fraction)
def test_G_increases_with_X(law, f1, f2):
    lo, hi = sorted((conversion(law, f1), conversion(law, f2)))
    assert law.G(lo) <= law.G(hi)
    assert law.G_inv(law.G(lo)) <= law.G_inv(law.G(hi))


def test_power_G_broadcasts_over_orders():
    # the Monte Carlo forecast draws the order: one X, many orders
    orders = np.array([0.5, 1.0, 1.0 + 1e-12, 2.0])
    G = power_G(0.9, orders)
    assert_allclose(G, [2 * (1 - 0.1**0.5), math.log(10), math.log(10), 9.0], rtol=1e-11)
    assert_allclose(power_G_inv(G, orders), 0.9, rtol=1e-14)


# ---------------------------------------------------------------------------
# The reversible law's algebra and the factory


def test_reversible_equilibrium_and_rate():
    # dX/dt = k[(1-X) - (Theta_R + X)/K] vanishes at X_e = (K - Theta_R)/(K + 1)
    # (Levenspiel 1999, eq. 3.53, from memory).
    law = ReversibleLaw(theta_r=0.1, k_eq_ref=4.0)
    Xe = law.x_eq(4.0)
    assert_allclose(Xe, (4.0 - 0.1) / 5.0, rtol=1e-15)
    assert abs(law.dxdt(Xe, 1e-3, 4.0)) < 1e-18
    assert law.dxdt(0.0, 1e-3, 4.0) == pytest.approx(1e-3 * (1 - 0.1 / 4.0), rel=1e-15)


def test_make_law_builds_and_rejects():
    assert make_law("power", order=2.0) == PowerLaw(order=2.0)
    assert make_law("bimolecular", theta_b=1.2, b=2.0) == BimolecularLaw(theta_b=1.2, b=2.0)
    with pytest.raises(ValueError, match="theta_b"):
        make_law("bimolecular")
    with pytest.raises(ValueError, match="theta_r > 0"):
        make_law("autocatalytic", theta_r=0.0)
    with pytest.raises(ValueError, match="k_eq_ref"):
        make_law("reversible")
    with pytest.raises(ValueError, match="unknown rate law"):
        make_law("zeroth")
