"""Arrhenius temperature dependence written around a reference temperature.

``k(T) = k_ref exp[-(Ea/R)(1/T - 1/T_ref)]``: with ``T_ref`` near the data's mean
of ``1/T`` the estimates of ``ln k_ref`` and ``Ea`` are nearly uncorrelated
(Schwaab, M. & Pinto, J. C., "Optimum reference temperature for reparameterization
of the Arrhenius equation", Chem. Eng. Sci. 62 (2007) 2750-2764,
doi:10.1016/j.ces.2007.02.020).
"""

from __future__ import annotations

import numpy as np

#: Molar gas constant [J/(mol K)], exact since the 2019 SI redefinition
#: (CODATA 2018: R = N_A k, both fixed).
R_J_PER_MOL_K = 8.314462618


def arrhenius_factor(T_K, ea_j_per_mol, t_ref_k):
    """Rate-constant ratio ``k(T)/k(T_ref)``.

    Parameters
    ----------
    T_K : float or array_like
        Temperature [K].
    ea_j_per_mol : float or array_like
        Activation energy [J/mol].
    t_ref_k : float
        Reference temperature [K].

    Returns
    -------
    float or numpy.ndarray
        ``exp[-(Ea/R)(1/T - 1/T_ref)]`` [-].

    Examples
    --------
    >>> float(arrhenius_factor(343.15, 65e3, 343.15))
    1.0
    """
    beta = np.asarray(ea_j_per_mol) / R_J_PER_MOL_K
    return np.exp(-beta * (1.0 / np.asarray(T_K) - 1.0 / t_ref_k))


def rate_constant(T_K, k_ref, ea_j_per_mol, t_ref_k):
    """Arrhenius rate constant at ``T_K`` [units of ``k_ref``]."""
    return k_ref * arrhenius_factor(T_K, ea_j_per_mol, t_ref_k)


def equilibrium_constant(T_K, k_eq_ref, dh_rxn_j_per_mol, t_ref_k):
    """Equilibrium constant by the integrated van 't Hoff equation.

    ``K(T) = K_ref exp[-(dH/R)(1/T - 1/T_ref)]`` with constant reaction enthalpy.

    Parameters
    ----------
    T_K : float or array_like
        Temperature [K].
    k_eq_ref : float
        Equilibrium constant at ``t_ref_k`` [-].
    dh_rxn_j_per_mol : float
        Standard reaction enthalpy [J/mol] (negative: exothermic, K falls with T).
    t_ref_k : float
        Reference temperature [K].

    Examples
    --------
    >>> round(float(equilibrium_constant(353.15, 4.0, -40e3, 343.15)), 4)
    2.6894
    """
    return k_eq_ref * arrhenius_factor(T_K, dh_rxn_j_per_mol, t_ref_k)


def harmonic_mean_temperature(T_K, weights=None) -> float:
    """The temperature whose inverse is the (weighted) mean of ``1/T`` [K].

    The usual choice of ``T_ref`` (Schwaab & Pinto 2007).
    """
    inv = 1.0 / np.asarray(T_K, dtype=float)
    return float(1.0 / np.average(inv, weights=weights))
