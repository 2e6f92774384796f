"""Kinetics: a fitted rate law as versioned data with its provenance (no file I/O here).

The file format is in INTERFACE.md. Optional ``[stderr]`` holds the standard
errors of ``k_ref``, ``ea_j_per_mol`` and ``order``, and ``correlation`` their
correlation (of ln k_ref, Ea, order) — written by ``convmon fit`` and used by the
forecast's Monte Carlo.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from ..physics.rate_laws import make_law

KEYS = {
    "rate_law",
    "order",
    "k_ref",
    "t_ref_k",
    "ea_j_per_mol",
    "activity_sd",
    "theta_b",
    "b",
    "theta_r",
    "k_eq_ref",
    "dh_rxn_j_per_mol",
    "epsilon",
    "provenance",
    "stderr",
    "correlation",
}


@dataclass(frozen=True)
class Kinetics:
    """A rate law with Arrhenius parameters around ``t_ref_k`` (SI; concentrations mol/L)."""

    rate_law: str
    k_ref: float
    t_ref_k: float
    ea_j_per_mol: float
    order: float = 1.0
    activity_sd: float = 0.05
    theta_b: float | None = None
    b: float = 1.0
    theta_r: float = 0.0
    k_eq_ref: float | None = None
    dh_rxn_j_per_mol: float = 0.0
    epsilon: float = 0.0
    stderr_k_ref: float = 0.0
    stderr_ea_j_per_mol: float = 0.0
    stderr_order: float = 0.0
    correlation: tuple = ()
    provenance: dict = field(default_factory=dict, hash=False, compare=False)
    source: str = field(default="", compare=False)
    digest: str = field(default="", compare=False)

    @cached_property
    def law(self):
        """The rate-law object (built once; the dataclass is frozen)."""
        return make_law(
            self.rate_law,
            order=self.order,
            theta_b=self.theta_b,
            b=self.b,
            theta_r=self.theta_r,
            k_eq_ref=self.k_eq_ref,
            dh_rxn_j_per_mol=self.dh_rxn_j_per_mol,
            epsilon=self.epsilon,
        )

    @property
    def version(self) -> str:
        """Short content hash: which kinetics produced a result."""
        return self.digest[:12]

    def parameter_cov(self) -> np.ndarray:
        """Covariance of (ln k_ref, Ea [J/mol], order) from the standard errors."""
        sd = np.array([self.stderr_k_ref / self.k_ref, self.stderr_ea_j_per_mol, self.stderr_order])
        corr = np.asarray(self.correlation, dtype=float) if self.correlation else np.eye(3)
        return corr * np.outer(sd, sd)


#: The law-specific keys of each rate law (the rest are common to all laws).
LAW_KEYS = {
    "power": ("order",),
    "bimolecular": ("theta_b", "b"),
    "autocatalytic": ("theta_r",),
    "reversible": ("theta_r", "k_eq_ref", "dh_rxn_j_per_mol"),
}
COMMON_KEYS = ("rate_law", "k_ref", "t_ref_k", "ea_j_per_mol", "activity_sd")


def kinetics_to_dict(kin: Kinetics) -> dict:
    """The file form of a kinetics object: only the keys its law uses.

    Common keys, then the law's own (`LAW_KEYS`); ``epsilon`` only for a variable
    volume (non-zero); ``[stderr]`` only for what was estimated (non-zero: a fit
    estimates the order's only for the power law); ``correlation`` and
    ``[provenance]`` when set.
    """
    own = {k: getattr(kin, k) for k in LAW_KEYS[kin.rate_law] if getattr(kin, k) is not None}
    d = {"rate_law": kin.rate_law}
    if "order" in own:  # the power law's order first, as people read it
        d["order"] = own.pop("order")
    d.update({k: getattr(kin, k) for k in COMMON_KEYS if k != "rate_law"})
    d.update(own)
    if kin.epsilon:
        d["epsilon"] = kin.epsilon
    stderr = {
        "k_ref": kin.stderr_k_ref,
        "ea_j_per_mol": kin.stderr_ea_j_per_mol,
        "order": kin.stderr_order,
    }
    stderr = {k: v for k, v in stderr.items() if v}
    if stderr:
        d["stderr"] = stderr
    if kin.correlation:
        d["correlation"] = [list(r) for r in kin.correlation]
    if kin.provenance:
        d["provenance"] = dict(kin.provenance)
    return d


def k_ref_unit(rate_law: str, order: float = 1.0) -> str:
    """The unit of ``k_ref`` for a law, with times in s and concentrations in mol/L.

    ``s⁻¹·(L/mol)^(n−1)`` for the power law of order n (``s⁻¹`` at n = 1,
    ``L/(mol·s)`` at n = 2); ``L/(mol·s)`` for the bimolecular and autocatalytic
    laws; ``s⁻¹`` for the reversible law.

    >>> k_ref_unit("power", 1.5)
    's⁻¹·(L/mol)^0.5'
    """
    if rate_law in ("bimolecular", "autocatalytic"):
        return "L/(mol·s)"
    if rate_law == "reversible":
        return "s⁻¹"
    m = float(order) - 1.0
    if m == 0:
        return "s⁻¹"
    if m == 1:
        return "L/(mol·s)"
    if m == -1:
        return "mol/(L·s)"
    if m > 0:
        return f"s⁻¹·(L/mol)^{m:.4g}"
    return f"s⁻¹·(mol/L)^{-m:.4g}"
