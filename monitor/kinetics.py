"""Kinetics files: a fitted rate law as versioned data with its provenance.

The file format is in INTERFACE.md. Optional ``[stderr]`` holds the standard
errors of ``k_ref``, ``ea_j_per_mol`` and ``order``, and ``correlation`` their
correlation (of ln k_ref, Ea, order) — written by ``convmon fit`` and used by the
forecast's Monte Carlo.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from dataclasses import asdict, dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
import tomli_w

from .errors import KineticsError
from .physics.rate_laws import LAWS, make_law

_KEYS = {
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


def load_kinetics(path: str | Path) -> Kinetics:
    """Read and check a kinetics file; errors name the file and key."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise KineticsError("kinetics file not found", path=p) from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise KineticsError(f"not valid TOML: {exc}", path=p) from None
    return kinetics_from_dict(data, path=p, digest=hashlib.sha256(raw).hexdigest())


def kinetics_from_dict(data: dict, *, path=None, digest: str = "") -> Kinetics:
    unknown = sorted(set(data) - _KEYS)
    if unknown:
        raise KineticsError(f"unknown key {unknown[0]!r}", path=path, key=unknown[0])

    def num(key, default=..., positive=False):
        if key not in data:
            if default is ...:
                raise KineticsError("missing required key", path=path, key=key)
            return default
        v = data[key]
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise KineticsError(f"expected a number, got {v!r}", path=path, key=key)
        if positive and v <= 0:
            raise KineticsError(f"expected a positive number, got {v!r}", path=path, key=key)
        return float(v)

    law = data.get("rate_law")
    if law not in LAWS:
        raise KineticsError(
            f"expected one of {', '.join(LAWS)}, got {law!r}", path=path, key="rate_law"
        )
    stderr = data.get("stderr", {})
    if not isinstance(stderr, dict):
        raise KineticsError("expected a table", path=path, key="stderr")
    corr = data.get("correlation", ())
    if corr and (np.shape(corr) != (3, 3)):
        raise KineticsError(
            "expected a 3x3 list (ln k_ref, Ea, order)", path=path, key="correlation"
        )
    kin = Kinetics(
        rate_law=law,
        k_ref=num("k_ref", positive=True),
        t_ref_k=num("t_ref_k", positive=True),
        ea_j_per_mol=num("ea_j_per_mol"),
        order=num("order", 1.0),
        activity_sd=num("activity_sd", 0.05),
        theta_b=num("theta_b", None),
        b=num("b", 1.0, positive=True),
        theta_r=num("theta_r", 0.0),
        k_eq_ref=num("k_eq_ref", None),
        dh_rxn_j_per_mol=num("dh_rxn_j_per_mol", 0.0),
        epsilon=num("epsilon", 0.0),
        stderr_k_ref=float(stderr.get("k_ref", 0.0)),
        stderr_ea_j_per_mol=float(stderr.get("ea_j_per_mol", 0.0)),
        stderr_order=float(stderr.get("order", 0.0)),
        correlation=tuple(tuple(float(x) for x in row) for row in corr),
        provenance=dict(data.get("provenance", {})),
        source=str(path or ""),
        digest=digest,
    )
    try:
        kin.law  # noqa: B018 - validates the law-specific keys
    except ValueError as exc:
        raise KineticsError(str(exc), path=path, key="rate_law") from None
    if kin.epsilon <= -1:
        raise KineticsError("epsilon must be > -1", path=path, key="epsilon")
    return kin


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


def write_kinetics(kin: Kinetics, path: str | Path, *, force: bool = False) -> Path:
    """Write a kinetics file; never overwrites silently (``force`` to replace)."""
    p = Path(path)
    if p.exists() and not force:
        raise KineticsError("file exists; choose a new name or pass --force", path=p)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = p.with_suffix(p.suffix + ".tmp")
    tmp.write_text(tomli_w.dumps(kinetics_to_dict(kin)), encoding="utf-8")
    tmp.replace(p)
    return p
