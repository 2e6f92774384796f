"""Kinetics files: read with physical sanity at the door, written without overwriting (#9, #10).

Every refusal names the file and the key and says what was expected (exit 2).
The limits and why they are where they are: `monitor.config.limits`.
"""

from __future__ import annotations

import copy
import hashlib
import math
from pathlib import Path

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from monitor.batch.kinetics import KEYS, Kinetics
from monitor.config import load_kinetics, write_kinetics
from monitor.config.kinetics_file import KineticsFile, kinetics_from_dict
from monitor.config.limits import EA_MAX_J_PER_MOL, TEMPERATURE_K
from monitor.errors import KineticsError
from monitor.physics.arrhenius import R_J_PER_MOL_K
from monitor.physics.rate_laws import LAWS

GOOD = {
    "rate_law": "power",
    "order": 2.0,
    "k_ref": 4.0e-4,
    "t_ref_k": 343.15,
    "ea_j_per_mol": 65000.0,
    "activity_sd": 0.05,
    "stderr": {"k_ref": 2e-5, "ea_j_per_mol": 3000.0, "order": 0.1},
    "correlation": [[1.0, 0.3, 0.0], [0.3, 1.0, -0.2], [0.0, -0.2, 1.0]],
    "provenance": {"source": "invented for this test", "batches": ["B1", "B2"]},
}
BIMOLECULAR = {**GOOD, "rate_law": "bimolecular", "order": 1.0, "theta_b": 1.2, "b": 1.0}
AUTOCATALYTIC = {**GOOD, "rate_law": "autocatalytic", "order": 1.0, "theta_r": 0.05}
REVERSIBLE = {
    **GOOD,
    "rate_law": "reversible",
    "order": 1.0,
    "k_eq_ref": 8.0,
    "dh_rxn_j_per_mol": -20e3,
}


def put(tmp_path: Path, data: dict, name: str = "k.toml") -> Path:
    p = tmp_path / name
    p.write_text(tomli_w.dumps(data), encoding="utf-8")
    return p


def with_(base: dict, **changes) -> dict:
    data = copy.deepcopy(base)
    for key, value in changes.items():
        if value is None:
            data.pop(key)
        else:
            data[key] = value
    return data


def test_the_file_keys_are_the_kinetics_keys():
    assert set(KineticsFile.model_fields) == KEYS


@pytest.mark.parametrize("path", sorted(Path("config/kinetics").glob("*.toml")))
def test_the_sample_kinetics_load(path):
    kin = load_kinetics(path)
    assert kin.ea_j_per_mol > 0 and kin.law is not None
    assert kin.source == str(path)


def test_version_is_the_files_sha256(tmp_path):
    p = put(tmp_path, GOOD)
    kin = load_kinetics(p)
    assert kin.digest == hashlib.sha256(p.read_bytes()).hexdigest()
    assert kin.version == kin.digest[:12]
    assert kin.correlation[0][1] == 0.3 and kin.stderr_order == 0.1
    assert kin.provenance["batches"] == ["B1", "B2"]


@pytest.mark.parametrize("data", [GOOD, BIMOLECULAR, AUTOCATALYTIC, REVERSIBLE])
def test_every_law_loads_and_builds_its_rate_law(tmp_path, data):
    kin = load_kinetics(put(tmp_path, data))
    assert kin.rate_law == data["rate_law"] and kin.law is not None


@pytest.mark.parametrize(
    "data, key, expected",
    [
        # each of these was accepted before (issue #10: a dangerous estimate followed)
        (with_(GOOD, ea_j_per_mol=-68000.0), "ea_j_per_mol", "(0, 400000]"),
        (with_(GOOD, ea_j_per_mol=0.0), "ea_j_per_mol", "(0, 400000]"),
        (with_(GOOD, ea_j_per_mol=650e3), "ea_j_per_mol", "(0, 400000]"),
        (with_(GOOD, order=7.0), "order", "[0, 4]"),
        (with_(GOOD, order=-1.0), "order", "[0, 4]"),
        (with_(GOOD, activity_sd=0.0), "activity_sd", "(0, 2]"),
        (with_(GOOD, activity_sd=-0.05), "activity_sd", "(0, 2]"),
        (with_(GOOD, activity_sd=5.0), "activity_sd", "(0, 2]"),  # 5 % written as 5
        (with_(GOOD, t_ref_k=70.0), "t_ref_k", "[150, 800]"),  # degC written as K
        (with_(GOOD, t_ref_k=2000.0), "t_ref_k", "[150, 800]"),
        (with_(BIMOLECULAR, theta_b=-1.2), "theta_b", "> 0"),
        (with_(BIMOLECULAR, theta_b=None), "theta_b", "needs theta_b"),
        (with_(REVERSIBLE, k_eq_ref=-8.0), "k_eq_ref", "> 0"),
        (with_(REVERSIBLE, theta_r=-0.1), "theta_r", ">= 0"),
        (with_(GOOD, stderr={"k_ref": -1e-5}), "stderr.k_ref", ">= 0"),
        (with_(GOOD, stderr={"ea_j_per_mol": "big"}), "stderr.ea_j_per_mol", "number"),
        (with_(GOOD, stderr={"theta_b": 0.1}), "stderr.theta_b", "unknown key"),
        (with_(GOOD, correlation=[[1, 0.3, 0], [0.1, 1, 0], [0, 0, 1]]), "correlation", "symm"),
        (with_(GOOD, correlation=[[2, 0, 0], [0, 1, 0], [0, 0, 1]]), "correlation", "diagonal"),
        (with_(GOOD, correlation=[[1, 1.5, 0], [1.5, 1, 0], [0, 0, 1]]), "correlation", "[-1, 1]"),
        # |r| <= 1 each, but no three variables can be correlated so (eigenvalue -0.8)
        (
            with_(GOOD, correlation=[[1, 0.9, -0.9], [0.9, 1, 0.9], [-0.9, 0.9, 1]]),
            "correlation",
            "semi-definite",
        ),
        (with_(GOOD, correlation=[[1, "x", 0], [0, 1, 0], [0, 0, 1]]), "correlation[0][1]", "num"),
        (with_(GOOD, eaa_j_per_mol=1.0), "eaa_j_per_mol", "did you mean 'ea_j_per_mol'?"),
        # refused before too, kept
        (with_(GOOD, k_ref=0.0), "k_ref", "> 0"),
        (with_(GOOD, k_ref=math.inf), "k_ref", "finite"),
        (with_(GOOD, k_ref=None), "k_ref", "missing"),
        (with_(GOOD, rate_law="zeroth"), "rate_law", "'power'"),
        (with_(BIMOLECULAR, b=0.0), "b", "> 0"),
        (with_(AUTOCATALYTIC, theta_r=0.0), "theta_r", "theta_r > 0"),
        (with_(GOOD, epsilon=-1.0), "epsilon", "> -1"),
        (with_(GOOD, correlation=[[1, 0], [0, 1]]), "correlation", "3x3"),
        (with_(GOOD, ea_j_per_mol=True), "ea_j_per_mol", "number"),
    ],
)
def test_refusals_name_file_key_and_what_was_expected(tmp_path, data, key, expected):
    p = put(tmp_path, data)
    with pytest.raises(KineticsError) as err:
        load_kinetics(p)
    msg = str(err.value)
    assert err.value.exit_code == 2 and "\n" not in msg
    assert msg.startswith(f"{p}: [{key}] ") and expected in msg, msg


def test_the_activation_energy_ceiling_is_no_reaction_at_all():
    """The ceiling's reason (limits.py), recomputed: at 400 kJ/mol and the hottest plausible
    800 K, even A = 1e17 s^-1 leaves a half-life of decades (27-31 years)."""
    k = 1e17 * math.exp(-EA_MAX_J_PER_MOL / (R_J_PER_MOL_K * TEMPERATURE_K[1]))
    half_life_years = math.log(2) / k / (365.25 * 86400)
    assert 27 < half_life_years < 31


def test_missing_unreadable_and_malformed_files(tmp_path):
    with pytest.raises(KineticsError, match="kinetics file not found"):
        load_kinetics(tmp_path / "absent.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text('rate_law = "power"\nk_ref = \n')
    with pytest.raises(KineticsError, match=r"not valid TOML at line 2") as err:
        load_kinetics(bad)
    assert str(bad) in str(err.value)
    with pytest.raises(KineticsError, match="cannot read"):
        load_kinetics(tmp_path)  # a folder


def test_write_then_load_gives_the_same_kinetics(tmp_path):
    kin = load_kinetics(put(tmp_path, REVERSIBLE, "a.toml"))
    out = write_kinetics(kin, tmp_path / "sub" / "b.toml")
    again = load_kinetics(out)
    assert again == kin  # compares every parameter (not source, digest or provenance)
    assert again.provenance == kin.provenance


def test_write_never_overwrites_silently(tmp_path):
    kin = load_kinetics(put(tmp_path, GOOD, "a.toml"))
    target = put(tmp_path, BIMOLECULAR, "b.toml")
    before = target.read_bytes()
    with pytest.raises(KineticsError, match="file exists"):
        write_kinetics(kin, target)
    assert target.read_bytes() == before
    write_kinetics(kin, target, force=True)
    assert load_kinetics(target) == kin


def test_write_refuses_kinetics_it_could_not_load_back(tmp_path):
    """Before: a fit that could not identify Ea wrote ``ea_j_per_mol = 0.0`` (issue #10)."""
    kin = Kinetics("power", k_ref=4e-4, t_ref_k=343.15, ea_j_per_mol=0.0, order=2.0)
    out = tmp_path / "fit.toml"
    with pytest.raises(KineticsError, match=r"\[ea_j_per_mol\] not written: expected") as err:
        write_kinetics(kin, out)
    assert str(out) in str(err.value)
    assert not out.exists()


_SCALARS = st.one_of(
    st.booleans(),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.floats(),
    st.text(max_size=20),
    st.sampled_from(["power", "reversible", "bimolecular", "autocatalytic", ""]),
    st.datetimes(),
)
JUNK = st.recursive(
    _SCALARS,
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=12), inner, max_size=4)
    ),
    max_leaves=12,
)
FULL = {**REVERSIBLE, "theta_b": 1.1, "b": 1.0, "theta_r": 0.1, "epsilon": 0.2}
PATHS = (
    [(k,) for k in FULL]
    + [("stderr", k) for k in GOOD["stderr"]]
    + [("correlation", i, j) for i in range(3) for j in range(3)]
)


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(where=st.sampled_from(PATHS), junk=JUNK, law=st.sampled_from(LAWS))
def test_junk_at_any_key_is_a_kinetics_error_never_a_traceback(where, junk, law):
    data = copy.deepcopy({**FULL, "rate_law": law})
    node = data
    for part in where[:-1]:
        node = node[part]
    node[where[-1]] = junk
    try:
        kin = kinetics_from_dict(data, path=Path("fuzz.toml"))
    except KineticsError as exc:
        assert str(exc).startswith("fuzz.toml: [") and len(str(exc).splitlines()) == 1, str(exc)
    else:
        assert kin.law is not None and kin.ea_j_per_mol > 0
