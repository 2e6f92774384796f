"""Kinetics files: read (checked for physical meaning, the content hash as the version), written.

The file's keys are those of `monitor.batch.kinetics.Kinetics` (format in
INTERFACE.md), validated by `KineticsFile`. Beyond types, a file must describe
a reaction that can exist (limits and their reasons in `monitor.config.limits`):
``0 < ea_j_per_mol <= 400 kJ/mol``, ``k_ref > 0``, ``order`` in [0, 4],
``0 < activity_sd <= 2``, ``t_ref_k`` in [150, 800] K; law-specific keys
(``theta_b > 0`` and ``b > 0`` for bimolecular, ``theta_r > 0`` for
autocatalytic, ``k_eq_ref > 0`` for reversible, ``theta_r >= 0``,
``epsilon > -1``); standard errors >= 0; the correlation of (ln k_ref, Ea,
order) a 3x3 symmetric matrix with unit diagonal, ``|r| <= 1``, positive
semi-definite (the forecast draws from it).
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Annotated, Any, Literal

import numpy as np
import tomli_w
from pydantic import BaseModel, Field, ValidationError, field_validator, model_validator

from ..batch.kinetics import Kinetics, kinetics_to_dict
from ..errors import KineticsError
from ..physics.rate_laws import LAWS
from . import limits
from .fields import FROZEN, Number, Positive, in_range
from .reading import located, raise_first_problem, read_toml

#: Tolerance of the correlation checks (symmetry, unit diagonal, |r| <= 1, eigenvalues):
#: a fitted correlation is exact up to rounding.
CORRELATION_TOL = 1e-8

NonNegative = Annotated[Number, in_range("a standard error", 0.0)]


class KineticsStderr(BaseModel):
    """``[stderr]``: standard errors of the fitted parameters (0: not estimated)."""

    model_config = FROZEN
    k_ref: NonNegative = Kinetics.stderr_k_ref
    ea_j_per_mol: NonNegative = Kinetics.stderr_ea_j_per_mol
    order: NonNegative = Kinetics.stderr_order


class KineticsFile(BaseModel):
    """A kinetics file's keys, one set of constraints (defaults from `Kinetics`)."""

    model_config = FROZEN
    rate_law: Literal[LAWS]
    k_ref: Positive
    t_ref_k: Annotated[Number, in_range("a reference temperature [K]", *limits.TEMPERATURE_K)]
    ea_j_per_mol: Annotated[
        Number,
        in_range("an activation energy [J/mol]", 0.0, limits.EA_MAX_J_PER_MOL, low_open=True),
    ]
    order: Annotated[Number, in_range("a reaction order", *limits.ORDER)] = Kinetics.order
    activity_sd: Annotated[
        Number,
        in_range("an activity spread (sd of ln)", 0.0, limits.ACTIVITY_SD_MAX, low_open=True),
    ] = Kinetics.activity_sd
    theta_b: Positive | None = Kinetics.theta_b
    b: Positive = Kinetics.b
    theta_r: Annotated[Number, in_range("a ratio", 0.0)] = Kinetics.theta_r
    k_eq_ref: Positive | None = Kinetics.k_eq_ref
    dh_rxn_j_per_mol: Number = Kinetics.dh_rxn_j_per_mol
    epsilon: Annotated[Number, in_range("a volume change", -1.0, low_open=True)] = Kinetics.epsilon
    stderr: KineticsStderr = KineticsStderr()
    correlation: tuple[tuple[Number, ...], ...] = ()
    provenance: dict[str, Any] = Field(default_factory=dict)

    @field_validator("correlation")
    @classmethod
    def _a_correlation_matrix(cls, corr: tuple) -> tuple:
        if not corr:
            return corr
        r = np.array(corr, dtype=float) if all(len(row) == 3 for row in corr) else None
        if r is None or r.shape != (3, 3):
            raise ValueError("expected a 3x3 list (ln k_ref, Ea, order)")
        if np.abs(r - r.T).max() > CORRELATION_TOL:
            raise ValueError("expected a symmetric matrix")
        if np.abs(np.diag(r) - 1.0).max() > CORRELATION_TOL:
            raise ValueError("expected 1 on the diagonal")
        if np.abs(r).max() > 1.0 + CORRELATION_TOL:
            raise ValueError("expected correlations in [-1, 1]")
        if np.linalg.eigvalsh(r).min() < -CORRELATION_TOL:
            raise ValueError("expected a positive semi-definite matrix (a possible correlation)")
        return corr

    @model_validator(mode="after")
    def _law_specific_keys(self) -> KineticsFile:
        needs = {
            "bimolecular": ("theta_b", "theta_b > 0 (charged B per charged A)"),
            "reversible": ("k_eq_ref", "k_eq_ref > 0 (equilibrium constant at t_ref_k)"),
        }
        if self.rate_law in needs and getattr(self, needs[self.rate_law][0]) is None:
            key, what = needs[self.rate_law]
            raise located((key,), f"the {self.rate_law} law needs {what}")
        if self.rate_law == "autocatalytic" and not self.theta_r > 0:
            raise located(
                ("theta_r",),
                "the autocatalytic law needs theta_r > 0 (some product present at the start)",
                self.theta_r,
            )
        return self

    def to_kinetics(self, *, source: str = "", digest: str = "") -> Kinetics:
        return Kinetics(
            rate_law=self.rate_law,
            k_ref=self.k_ref,
            t_ref_k=self.t_ref_k,
            ea_j_per_mol=self.ea_j_per_mol,
            order=self.order,
            activity_sd=self.activity_sd,
            theta_b=self.theta_b,
            b=self.b,
            theta_r=self.theta_r,
            k_eq_ref=self.k_eq_ref,
            dh_rxn_j_per_mol=self.dh_rxn_j_per_mol,
            epsilon=self.epsilon,
            stderr_k_ref=self.stderr.k_ref,
            stderr_ea_j_per_mol=self.stderr.ea_j_per_mol,
            stderr_order=self.stderr.order,
            correlation=self.correlation,
            provenance=dict(self.provenance),
            source=source,
            digest=digest,
        )


def load_kinetics(path: str | Path) -> Kinetics:
    """Read and check a kinetics file; errors name the file and key (`KineticsError`, exit 2)."""
    p = Path(path)
    raw, data = read_toml(p, KineticsError, "kinetics file")
    return kinetics_from_dict(data, path=p, digest=hashlib.sha256(raw).hexdigest())


def kinetics_from_dict(data: dict, *, path: Path | None = None, digest: str = "") -> Kinetics:
    """Check parsed kinetics (``path`` for messages) and build the `Kinetics` they describe."""
    try:
        model = KineticsFile.model_validate(data, by_alias=True, by_name=False)
    except ValidationError as exc:
        raise_first_problem(exc, KineticsFile, KineticsError, path)
    return model.to_kinetics(source=str(path or ""), digest=digest)


def write_kinetics(kin: Kinetics, path: str | Path, *, force: bool = False) -> Path:
    """Write a kinetics file; never overwrites silently (``force`` to replace).

    The kinetics are checked as a file would be before anything is written, so a
    file that could not be loaded back is never written (`KineticsError` naming the key).
    """
    p = Path(path)
    data = kinetics_to_dict(kin)
    try:
        KineticsFile.model_validate(data, by_alias=True, by_name=False)
    except ValidationError as exc:
        raise_first_problem(exc, KineticsFile, KineticsError, p, prefix="not written: ")
    if p.exists() and not force:
        raise KineticsError("file exists; choose a new name or pass --force", path=p)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = p.with_suffix(p.suffix + ".tmp")
    tmp.write_text(tomli_w.dumps(data), encoding="utf-8")
    tmp.replace(p)
    return p
