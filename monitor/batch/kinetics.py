"""Kinetics: a fitted rate law as versioned data with its provenance (no file I/O here).

The file format is in INTERFACE.md. Optional ``[stderr]`` holds the standard
errors of ``k_ref``, ``ea_j_per_mol`` and ``order``, and ``correlation`` their
correlation (of ln k_ref, Ea, order) — written by ``convmon fit`` and used by the
forecast's Monte Carlo.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
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


def kinetics_to_dict(kin: Kinetics) -> dict:
    """The file form of a kinetics object (None and empty entries left out)."""
    d = {k: v for k, v in asdict(kin).items() if v is not None}
    for k in ("source", "digest"):
        d.pop(k)
    d["stderr"] = {
        "k_ref": d.pop("stderr_k_ref"),
        "ea_j_per_mol": d.pop("stderr_ea_j_per_mol"),
        "order": d.pop("stderr_order"),
    }
    corr = d.pop("correlation")
    if corr:
        d["correlation"] = [list(r) for r in corr]
    if not d.get("provenance"):
        d.pop("provenance", None)
    return d
