"""Kinetics files: read (checked, with a content hash as the version) and written."""

from __future__ import annotations

import hashlib
import math
import tomllib
from pathlib import Path

import numpy as np
import tomli_w

from ..batch.kinetics import KEYS, Kinetics, kinetics_to_dict
from ..errors import KineticsError
from ..physics.rate_laws import LAWS


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
    unknown = sorted(set(data) - KEYS)
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
