"""`convmon fit` end to end: the historian, the kinetics file, plots, JSON, lab CSVs.

The sample plant's truth (sample_historian.generate) is the outside check here: the
generator integrates its own kinetics with solve_ivp, independently of monitor.
"""

from __future__ import annotations

import hashlib
import json
import math
import tomllib
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
import tomli_w

from monitor import __version__
from monitor.cli.fit import FitProgress
from monitor.config import load_config, load_kinetics
from monitor.errors import KineticsError, UsageError
from monitor.fitting import job as fitjob
from tests.cli_runner import convmon

REPO = Path(__file__).resolve().parents[1]
LAB_EXAMPLE = REPO / "config" / "lab" / "dim7_lab_runs.csv"
R = 8.314462618
FIT_KEYS = {
    "rate_law",
    "order",
    "k_ref",
    "t_ref_k",
    "ea_j_per_mol",
    "stderr",
    "activity_sd",
    "n_batches",
    "n_assays",
    "rmse",
    "aic",
    "candidates",
}


def run_main(*args):
    """``convmon ARGS`` through CliRunner: returns (exit code, stdout, stderr)."""
    r = convmon(*args)
    return r.exit_code, r.stdout, r.stderr


def k_at(recipe_truth: dict, t_ref_k: float) -> float:
    """The generator's k_ref moved to another reference temperature."""
    return recipe_truth["k_ref"] * math.exp(
        -recipe_truth["ea_j_per_mol"] / R * (1 / t_ref_k - 1 / recipe_truth["t_ref_k"])
    )


def inside(interval, value) -> bool:
    return interval[0] <= value <= interval[1]


# ------------------------------------------------------------------ the command on a small plant
@pytest.fixture(scope="module")
def small_fit(small_plant, tmp_path_factory):
    out = tmp_path_factory.mktemp("fit") / "dim7-v1.toml"
    r = convmon(
        "fit",
        "--config",
        str(small_plant.config_path),
        "--recipe",
        "DIM-7",
        "--out",
        str(out),
        "--json",
    )
    return r, out


def test_fit_json_has_the_interface_keys(small_fit, small_plant):
    r, out = small_fit
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)  # stdout is exactly the JSON document
    assert set(doc) >= FIT_KEYS
    assert set(doc["stderr"]) == {"k_ref", "ea_j_per_mol", "order"}
    assert (doc["rate_law"], doc["order"]) == ("power", 2.0)  # the recipe's current law
    assert doc["stderr"]["order"] is None  # fixed, not fitted
    complete = [
        b["batch"]
        for b in small_plant.truth["batches"]
        if b["recipe"] == "DIM-7" and b["state"] == "complete"
    ]
    assert doc["n_batches"] == len(complete) == len(doc["residuals_by_batch"])
    assert doc["n_assays"] == sum(b["n_assays"] for b in doc["residuals_by_batch"])
    labels = [c["label"] for c in doc["candidates"]]
    assert labels == ["power n=1.0", "power n=2.0", "power n=free"]
    aic = {c["label"]: c["aic"] for c in doc["candidates"]}
    assert aic["power n=2.0"] < aic["power n=1.0"]  # the generator's law is second order
    assert abs(doc["correlation"][0][1]) < 0.01
    assert "\x1b[" not in r.stderr and "loading" not in r.stderr  # no progress off a terminal


def test_kinetics_file_and_provenance(small_fit):
    r, out = small_fit
    doc = json.loads(r.stdout)
    kin = load_kinetics(out)
    assert (kin.rate_law, kin.order) == ("power", 2.0)
    assert math.isclose(kin.k_ref, doc["k_ref"]) and math.isclose(kin.t_ref_k, doc["t_ref_k"])
    assert math.isclose(kin.ea_j_per_mol, doc["ea_j_per_mol"])
    assert math.isclose(kin.stderr_ea_j_per_mol, doc["stderr"]["ea_j_per_mol"])
    assert math.isclose(kin.activity_sd, doc["activity_sd"])
    assert np.shape(kin.correlation) == (3, 3)
    prov = kin.provenance
    assert prov["batches"] == [b["batch"] for b in doc["residuals_by_batch"]]
    assert prov["software"] == f"convmon {__version__}"
    assert datetime.fromisoformat(prov["fitted_at"]).utcoffset().total_seconds() == 0
    for key in ("n_assays", "rmse", "aic", "bic", "t_ref_choice", "method", "candidates"):
        assert key in prov, key
    for name in ("parity", "residuals"):
        png = Path(doc["plots"][name])
        assert png.parent == out.parent and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_never_overwrites_silently(small_fit, small_plant):
    r, out = small_fit
    before = hashlib.sha256(out.read_bytes()).hexdigest()
    cfg = str(small_plant.config_path)
    code, _, err = run_main("fit", "--config", cfg, "--recipe", "DIM-7", "--out", str(out))
    assert code == 2
    assert "dim7-v2.toml" in err and "--force" in err
    assert hashlib.sha256(out.read_bytes()).hexdigest() == before
    two = ",".join(b["batch"] for b in json.loads(r.stdout)["residuals_by_batch"][:2])
    code, text, err = run_main(
        "fit",
        "--config",
        cfg,
        "--recipe",
        "DIM-7",
        "--out",
        str(out),
        "--batches",
        two,
        "--force",
    )
    assert code == 0, err
    assert "fitted power" in text and "Ea" in text
    assert load_kinetics(out).provenance["batches"] == two.split(",")


def test_next_free_name(tmp_path):
    (tmp_path / "k.toml").write_text("")
    assert fitjob.next_free_name(tmp_path / "k.toml") == tmp_path / "k-v2.toml"
    (tmp_path / "k-v2.toml").write_text("")
    assert fitjob.next_free_name(tmp_path / "k.toml") == tmp_path / "k-v3.toml"
    assert fitjob.next_free_name(tmp_path / "k-v2.toml") == tmp_path / "k-v3.toml"


def test_fitted_file_loads_into_estimate(small_fit, small_plant, tmp_path):
    _, out = small_fit
    data = tomllib.loads(small_plant.config_path.read_text(encoding="utf-8"))
    data["recipes"]["DIM-7"]["kinetics"] = str(out)
    cfg_path = tmp_path / "refitted.toml"
    cfg_path.write_text(tomli_w.dumps(data), encoding="utf-8")
    batch = next(b["batch"] for b in small_plant.truth["batches"] if b["recipe"] == "DIM-7")
    code, text, err = run_main("estimate", "--batch", batch, "--config", str(cfg_path), "--json")
    assert code == 0, err
    est = json.loads(text)
    assert est["kinetics_version"] == load_kinetics(out).version
    assert 0.0 <= est["conversion"] <= 1.0


def test_usage_errors_exit_2(small_plant, tmp_path):
    cfg = str(small_plant.config_path)
    out = str(tmp_path / "a.toml")
    code, _, err = run_main(
        "fit", "--config", cfg, "--recipe", "DIM-7", "--order", "loose", "--out", out
    )
    assert code == 2 and "--order" in err
    code, _, err = run_main(
        "fit", "--config", cfg, "--recipe", "DIM-7", "--batches", "NO-SUCH", "--out", out
    )
    assert code == 2 and "NO-SUCH" in err
    running = [
        b["batch"]
        for b in small_plant.truth["batches"]
        if b["state"] == "running" and b["recipe"] == "DIM-7"
    ]
    if running:
        code, _, err = run_main(
            "fit",
            "--config",
            cfg,
            "--recipe",
            "DIM-7",
            "--batches",
            running[0],
            "--out",
            out,
        )
        assert code == 2 and "still running" in err
    code, _, err = run_main(
        "fit", "--config", cfg, "--recipe", "DIM-7", "--law", "reversible", "--out", out
    )
    assert code == 2 and "not separable" in err
    code, _, err = run_main("fit", "--config", cfg, "--recipe", "NOPE", "--out", out)
    assert code == 2 and "NOPE" in err
    assert not (tmp_path / "a.toml").exists()


def test_progress_bars_run(capsys):
    with FitProgress() as p:
        p.loading(1, 2, "B1")
        p.loading(2, 2, "B2")
        p.stage("fitting power")
        p.iteration(3)
    assert capsys.readouterr().out == ""  # progress never goes to stdout


# ------------------------------------------------------------------ the sample plant's truth
def test_sample_plant_dim7_recovers_the_generator(sample_plant, tmp_path):
    """Issue 5 acceptance: the true Ea, k_ref and order inside the reported 95 % intervals.

    The generator plants a catalyst drift in DIM-7's last batches (truth["drift"]): the
    kinetics really change there, so the fit uses the batches before its onset, as an
    engineer would after the drift review. The planted gross lab error must be found.
    """
    truth = sample_plant.truth
    drifted = set(truth["drift"]["batches"])
    before = [
        b["batch"]
        for b in truth["batches"]
        if b["recipe"] == "DIM-7" and b["state"] == "complete" and b["batch"] not in drifted
    ]
    cfg = load_config(sample_plant.config_path)
    doc = fitjob.fit_recipe(cfg, "DIM-7", tmp_path / "dim7.toml", batches=before, order="free")
    tr = truth["recipes"]["DIM-7"]
    assert inside(doc["ci95"]["ea_j_per_mol"], tr["ea_j_per_mol"])
    assert inside(doc["ci95"]["order"], tr["order"])
    assert inside(doc["ci95"]["k_ref"], k_at(tr, doc["t_ref_k"]))
    assert 0.5 * tr["activity_sd"] < doc["activity_sd"] < 2.0 * tr["activity_sd"]
    outlier = truth["faults"].get("outlier_assay")
    if outlier and outlier["batch"] in before:
        assert [e["batch"] for e in doc["excluded_assays"]] == [outlier["batch"]]


def test_sample_plant_cpl3_bimolecular_recovers_the_generator(sample_plant, tmp_path):
    truth = sample_plant.truth
    cfg = load_config(sample_plant.config_path)
    doc = fitjob.fit_recipe(cfg, "CPL-3", tmp_path / "cpl3.toml")
    tr = truth["recipes"]["CPL-3"]
    assert doc["rate_law"] == "bimolecular" and doc["law_params"]["theta_b"] == tr["theta_b"]
    assert inside(doc["ci95"]["ea_j_per_mol"], tr["ea_j_per_mol"])
    assert inside(doc["ci95"]["k_ref"], k_at(tr, doc["t_ref_k"]))
    best = min((c for c in doc["candidates"] if c["aic"] is not None), key=lambda c: c["aic"])
    assert best["rate_law"] == "bimolecular"
    fitted = {b["batch"]: b["activity"] for b in doc["residuals_by_batch"]}
    true = {b["batch"]: b["activity"] for b in truth["batches"] if b["batch"] in fitted}
    names = sorted(fitted)
    r = np.corrcoef(np.log([fitted[n] for n in names]), np.log([true[n] for n in names]))[0, 1]
    assert r > 0.8  # the per-batch activities are the batches' own


# ------------------------------------------------------------------ lab CSVs
LEVENSPIEL_3_1_CSV = """time_s,T_K,c_a
0,298.15,10
20,298.15,8
40,298.15,6
60,298.15,5
120,298.15,3
180,298.15,2
300,298.15,1
"""


def test_lab_csv_levenspiel_3_1_free_order(tmp_path, monkeypatch):
    """Levenspiel 3rd ed., Example 3.1 (from memory) as a lab CSV: n 1.40-1.46, k ~ 0.005.

    One temperature cannot identify Ea: the prior kinetics of the configuration's LAB
    recipe keep it (without a prior no file is written: the next test)."""
    csv_path = tmp_path / "lev.csv"
    csv_path.write_text(LEVENSPIEL_3_1_CSV)
    prior = {"rate_law": "power", "order": 1.5, "k_ref": 5e-3, "t_ref_k": 298.15}
    (tmp_path / "prior.toml").write_text(tomli_w.dumps({**prior, "ea_j_per_mol": 50e3}))
    (tmp_path / "convmon.toml").write_text(
        '[historian]\nurl = "sqlite:///plant.db"\n[recipes.LAB]\nkinetics = "prior.toml"\n'
    )
    monkeypatch.chdir(tmp_path)  # the default ./convmon.toml names the prior
    monkeypatch.delenv("CONVMON_CONFIG", raising=False)
    code, text, err = run_main(
        "fit",
        "--recipe",
        "LAB",
        "--lab-csv",
        str(csv_path),
        "--law",
        "power",
        "--order",
        "free",
        "--out",
        str(tmp_path / "lev.toml"),
        "--json",
    )
    assert code == 0, err
    doc = json.loads(text)
    assert 1.40 <= doc["order"] <= 1.46
    assert abs(doc["k_ref"] / 0.005 - 1) < 0.10
    assert doc["ea_j_per_mol"] is None  # one temperature: said, not printed
    assert any("Ea cannot be identified" in w for w in doc["warnings"])
    assert doc["lab_methods"][0]["differential"]["order"] == pytest.approx(1.4, abs=0.1)
    written = load_kinetics(tmp_path / "lev.toml")
    assert written.order == pytest.approx(doc["order"])
    assert written.ea_j_per_mol == 50e3 and "ea_j_per_mol" in written.provenance["fixed"]
    code, text, err = run_main(
        "fit",
        "--recipe",
        "LAB",
        "--lab-csv",
        str(csv_path),
        "--law",
        "power",
        "--order",
        "free",
        "--out",
        str(tmp_path / "lev2.toml"),
    )
    assert code == 0, err
    assert "Ea           not identifiable from these data" in text


def test_lab_csv_at_one_temperature_without_a_prior_writes_no_file(tmp_path, monkeypatch):
    """Issue #10: an Ea the data cannot identify is never written as 0 with sd 0."""
    csv_path = tmp_path / "lev.csv"
    csv_path.write_text(LEVENSPIEL_3_1_CSV)
    monkeypatch.chdir(tmp_path)  # no convmon.toml here: a lab fit needs no configuration
    monkeypatch.delenv("CONVMON_CONFIG", raising=False)
    out = tmp_path / "lev.toml"
    args = ("fit", "--recipe", "LAB", "--lab-csv", str(csv_path), "--order", "free")
    code, text, err = run_main(*args, "--out", str(out))
    assert code == 2 and "[ea_j_per_mol] not written" in err and str(out) in err, err
    assert not out.exists()


def test_lab_csv_example_at_three_temperatures(tmp_path):
    # the invented example in config/lab (made with second order, Ea = 68 kJ/mol)
    doc = fitjob.fit_lab_csv(LAB_EXAMPLE, tmp_path / "lab.toml", law="power", order="free")
    assert doc["n_batches"] == 3 and doc["n_assays"] == 27
    assert inside(doc["ci95"]["order"], 2.0)
    assert inside(doc["ci95"]["ea_j_per_mol"], 68e3)
    arr = doc["arrhenius"]
    assert abs(arr["ea_j_per_mol"] - 68e3) < 3 * arr["stderr_ea_j_per_mol"]
    assert abs(arr["correlation_ln_k_ref_ea"]) < 1e-8


def test_lab_csv_headers_and_errors(tmp_path):
    p = tmp_path / "min.csv"
    p.write_text(
        "# minutes and Celsius\nrun,time_min,T_degC,c_a\nA,0,50,1.0\nA,1,50,0.9\nA,2,50,0.81\n"
    )
    series, sd_known = fitjob.read_lab_csv(p)
    assert not sd_known and series[0].T_K[0] == pytest.approx(323.15)
    assert list(series[0].assay_t_s) == [60.0, 120.0] and series[0].c_a0 == 1.0
    bad = tmp_path / "bad.csv"
    bad.write_text("t,T,c\n0,300,1\n")
    with pytest.raises(UsageError, match="expected columns"):
        fitjob.read_lab_csv(bad)
    bad.write_text("time_s,T_K,c_a\n10,300,0.9\n")
    with pytest.raises(UsageError, match="no row at time 0"):
        fitjob.read_lab_csv(bad)
    out = tmp_path / "x.toml"
    out.write_text("")
    with pytest.raises(KineticsError, match="x-v2.toml"):
        fitjob.fit_lab_csv(p, out)
