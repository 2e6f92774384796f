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
from monitor.batch.kinetics import Kinetics, k_ref_unit
from monitor.cli.fit import FitProgress
from monitor.config import load_config, load_kinetics, write_kinetics
from monitor.errors import KineticsError, UsageError
from monitor.fitting import job as fitjob
from monitor.fitting import plots
from monitor.fitting.progress import FitProgress as FitProgressProtocol
from monitor.fitting.sources import read_lab_csv
from monitor.outputs.fit_report import fit_text
from monitor.physics.plant_fit import FitSeries, fit_batches, ln_k_band
from tests.cli_runner import convmon

REPO = Path(__file__).resolve().parents[1]
LAB_EXAMPLE = REPO / "config" / "lab" / "dim7_lab_runs.csv"
R = 8.314462618
FIT_KEYS = {
    "bic",
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
    bic = {c["label"]: c["bic"] for c in doc["candidates"]}
    assert bic["power n=2.0"] < bic["power n=1.0"]
    for c in doc["candidates"]:
        assert c["delta_aic"] == pytest.approx(c["aic"] - min(aic.values()))
        assert c["delta_bic"] == pytest.approx(c["bic"] - min(bic.values()))
    assert [c["chosen"] for c in doc["candidates"]] == [False, True, False]
    assert doc["k_ref_unit"] == "L/(mol·s)" == k_ref_unit("power", 2.0)
    for f in doc["findings"]:  # warnings as typed values: kind, message, data
        assert set(f) == {"kind", "message", "data"} and f["message"] in doc["warnings"]
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
    assert prov["k_ref_unit"] == "L/(mol·s)"
    # the order was not estimated: the recipe's current kinetics gave it, and that is said
    assert prov["fixed"] == {
        "order": f"2, from the prior kinetics dim7.toml, version {prov['prior_kinetics_version']}"
    }
    for name in ("parity", "residuals", "arrhenius"):  # a plant fit has its Arrhenius plot
        png = Path(doc["plots"][name])
        assert png.parent == out.parent and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def _strings(x):
    if isinstance(x, dict):
        for v in x.values():
            yield from _strings(v)
    elif isinstance(x, list):
        for v in x:
            yield from _strings(v)
    elif isinstance(x, str):
        yield x


def test_kinetics_file_holds_only_its_laws_keys_and_no_absolute_path(small_fit):
    """Issue 11: a power-law file has no theta_b, b, theta_r, dh_rxn or epsilon; no paths."""
    _, out = small_fit
    data = tomllib.loads(out.read_text(encoding="utf-8"))
    assert set(data) == {
        "rate_law",
        "order",
        "k_ref",
        "t_ref_k",
        "ea_j_per_mol",
        "activity_sd",
        "stderr",
        "correlation",
        "provenance",
    }
    assert set(data["stderr"]) == {"k_ref", "ea_j_per_mol"}  # the order was not estimated
    assert data["provenance"]["prior_kinetics"] == "dim7.toml"  # a name, not the full path
    for text in _strings(data):
        assert not Path(text).is_absolute() and str(out.parent) not in text, text


@pytest.mark.parametrize(
    ("law", "extra", "keys"),
    [
        ("power", {"order": 1.5}, {"order"}),
        ("bimolecular", {"theta_b": 1.2, "b": 1.0}, {"theta_b", "b"}),
        ("autocatalytic", {"theta_r": 0.02}, {"theta_r"}),
        (
            "reversible",
            {"theta_r": 0.0, "k_eq_ref": 4.0, "dh_rxn_j_per_mol": -2e4},
            {"theta_r", "k_eq_ref", "dh_rxn_j_per_mol"},
        ),
    ],
)
def test_kinetics_file_keys_per_law(tmp_path, law, extra, keys):
    kin = Kinetics(law, 1e-3, 340.0, 60e3, activity_sd=0.07, **extra)
    path = write_kinetics(kin, tmp_path / "k.toml")
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    common = {"rate_law", "k_ref", "t_ref_k", "ea_j_per_mol", "activity_sd"}
    assert set(data) == common | keys  # no stderr, correlation or provenance when unset
    assert load_kinetics(path) == kin  # and it reads back the same
    varied = Kinetics(law, 1e-3, 340.0, 60e3, epsilon=0.2, stderr_k_ref=1e-5, **extra)
    data = tomllib.loads(write_kinetics(varied, tmp_path / "v.toml").read_text(encoding="utf-8"))
    assert data["epsilon"] == 0.2 and data["stderr"] == {"k_ref": 1e-5}


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


def test_fit_text_an_engineer_can_defend(small_fit):
    """Issue 11: k_ref with its unit, AIC and BIC per candidate, each batch's activity."""
    r, _ = small_fit
    doc = json.loads(r.stdout)
    text = fit_text(doc)
    assert f"{doc['k_ref']:.4g}" in text and "L/(mol·s) at T_ref" in text
    header = next(line for line in text.splitlines() if "ΔAIC" in line)
    assert "AIC" in header and "BIC" in header and "ΔBIC" in header
    for c in doc["candidates"]:
        row = next(line for line in text.splitlines() if line.strip().startswith(c["label"]))
        assert f"{c['aic']:.1f}" in row and f"{c['bic']:.1f}" in row
    for b in doc["residuals_by_batch"]:  # every batch with its activity
        row = next(line for line in text.splitlines() if line.strip().startswith(b["batch"]))
        assert f"{b['activity']:.3f}" in row
    assert "held         order: 2, from the prior kinetics dim7.toml" in text


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
    assert isinstance(FitProgress(), FitProgressProtocol)  # the CLI implements the job's protocol
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
    """Levenspiel 3rd ed., 1999, Example 3.1 data (from memory) as a lab CSV.

    The book's n = 1.4 and k = 0.005 come from its fractional-life method on times read
    off a drawn curve; least squares gives n = 1.456, so the job must equal the integral
    method (checked against scipy in tests/test_fitting.py) and is pinned, not compared
    with the book. One temperature cannot identify Ea: the prior kinetics of the
    configuration's LAB recipe keep it (without a prior no file is written: the next
    test)."""
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
    integral = doc["lab_methods"][0]["integral"]
    assert doc["order"] == pytest.approx(integral["order"], rel=1e-6)
    assert doc["k_ref"] == pytest.approx(integral["k"], rel=1e-5)
    assert [doc["order"], doc["k_ref"]] == pytest.approx(
        [1.45558763, 0.00471020], rel=1e-6
    )  # regression
    assert doc["ea_j_per_mol"] is None  # one temperature: said, not printed
    (held,) = [f for f in doc["findings"] if f["kind"] == "unidentifiable"]
    assert held["data"]["parameter"] == "ea_j_per_mol" and held["data"]["source"] == "prior"
    assert doc["lab_methods"][0]["differential"]["order"] == pytest.approx(1.3791860, rel=1e-6)
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
    assert "two or more temperatures" in err  # says which data would identify it
    assert len(err.strip().splitlines()) == 1 and text == ""
    assert not out.exists() and not list(tmp_path.glob("lev_*.png"))
    with pytest.raises(KineticsError, match="batches \\(or lab runs\\) held at two or more"):
        fitjob.fit_lab_csv(csv_path, out, law="power", order="free")
    assert not out.exists()


def test_lab_csv_at_one_temperature_keeps_the_prior_ea_marked_fixed(tmp_path):
    """Levenspiel 3rd ed. Example 3.1 data (from memory) with a prior: Ea held, and said."""
    csv_path = tmp_path / "lev.csv"
    csv_path.write_text(LEVENSPIEL_3_1_CSV)
    prior_path = write_kinetics(
        Kinetics("power", 5e-3, 298.15, 50e3, order=1.4, stderr_ea_j_per_mol=4e3),
        tmp_path / "prior" / "lev-prior.toml",
    )
    prior = load_kinetics(prior_path)
    out = tmp_path / "lev.toml"
    doc = fitjob.fit_lab_csv(
        csv_path, out, prior=prior, prior_path=prior_path, law="power", order="free"
    )
    # the book's order 1.4 at its one decimal is not what least squares gives (1.456):
    # the joint fit must equal the integral method on the same data (tests/test_fitting.py)
    assert doc["order"] == pytest.approx(1.455587634, rel=1e-6)  # regression
    assert doc["ea_j_per_mol"] is None  # not estimated: said, not printed as a result
    assert doc["fixed"]["ea_j_per_mol"]["source"] == "prior"
    assert doc["fixed"]["ea_j_per_mol"]["value"] == 50e3 == doc["ea_j_per_mol_written"]
    kin = load_kinetics(out)
    assert kin.ea_j_per_mol == 50e3 and kin.stderr_ea_j_per_mol == 4e3  # the prior's own
    note = kin.provenance["fixed"]["ea_j_per_mol"]
    assert "lev-prior.toml" in note and prior.version in note and "unidentifiable" in note
    assert kin.provenance["lab_csv"] == "lev.csv"  # a name, no absolute path
    assert "arrhenius" not in doc["plots"]  # no Arrhenius plot of an Ea it did not estimate
    assert doc["lab_methods"][0]["differential"]["order"] == pytest.approx(1.3791860, rel=1e-6)


def test_lab_csv_example_at_three_temperatures(tmp_path):
    # the invented example in config/lab (made with second order, Ea = 68 kJ/mol)
    doc = fitjob.fit_lab_csv(LAB_EXAMPLE, tmp_path / "lab.toml", law="power", order="free")
    assert doc["n_batches"] == 3 and doc["n_assays"] == 27
    assert inside(doc["ci95"]["order"], 2.0)
    assert inside(doc["ci95"]["ea_j_per_mol"], 68e3)
    arr = doc["arrhenius"]
    assert abs(arr["ea_j_per_mol"] - 68e3) < 3 * arr["stderr_ea_j_per_mol"]
    assert abs(arr["correlation_ln_k_ref_ea"]) < 1e-8
    assert [p["run"] for p in arr["points"]] == ["L60", "L70", "L80"]
    assert set(doc["plots"]) == {"parity", "residuals", "arrhenius"}
    kin = load_kinetics(tmp_path / "lab.toml")  # lab runs say nothing of the plant's spread:
    assert "assumed 0.05" in kin.provenance["fixed"]["activity_sd"]  # written, and marked
    assert [f["kind"] for f in doc["findings"]] == ["activity_sd_not_fitted"]


def test_lab_csv_headers_and_errors(tmp_path):
    p = tmp_path / "min.csv"
    p.write_text(
        "# minutes and Celsius\nrun,time_min,T_degC,c_a\nA,0,50,1.0\nA,1,50,0.9\nA,2,50,0.81\n"
    )
    series, sd_known = read_lab_csv(p)
    assert not sd_known and series[0].T_K[0] == pytest.approx(323.15)
    assert list(series[0].assay_t_s) == [60.0, 120.0] and series[0].c_a0 == 1.0
    bad = tmp_path / "bad.csv"
    bad.write_text("t,T,c\n0,300,1\n")
    with pytest.raises(UsageError, match="expected columns"):
        read_lab_csv(bad)
    bad.write_text("time_s,T_K,c_a\n10,300,0.9\n")
    with pytest.raises(UsageError, match="no row at time 0"):
        read_lab_csv(bad)
    out = tmp_path / "x.toml"
    out.write_text("")
    with pytest.raises(KineticsError, match="x-v2.toml"):
        fitjob.fit_lab_csv(p, out)


# ------------------------------------------------------------------ plots, by content
@pytest.fixture(scope="module")
def plotted_fit():
    """Six invented isothermal batches at two holds, second order, one gross lab error.

    C_A = C_A0 / (1 + k C_A0 t) with Arrhenius k (closed form); the fit is not checked
    here, only what the pictures show of it.
    """
    rng = np.random.default_rng(7)
    series = []
    for b in range(6):
        T = 340.0 if b % 2 else 350.0
        k = 5e-4 * math.exp(-65e3 / R * (1 / T - 1 / 343.15))
        t = np.arange(0.0, 5 * 3600.0 + 60.0, 60.0)
        ta = np.linspace(1800.0, 5 * 3600.0, 6)
        y = 1.6 / (1 + k * 1.6 * ta) + rng.normal(0.0, 0.01, len(ta))
        if b == 2:
            y[3] += 0.2  # a gross lab error: 20 sigma
        series.append(FitSeries(f"B{b}", t, np.full(len(t), T), 1.6, ta, y, "concentration", 0.01))
    return fit_batches(series, "power", 2.0, ea_prior_j_per_mol=60e3)


def _labels_have_units(fig):
    for ax in fig.axes:
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            assert not label or ("[" in label and "]" in label), label


def test_parity_plot_identifies_points_and_the_left_out_assay(plotted_fit):
    fit = plotted_fit
    fig = plots.parity_figure(fit, "concentration")
    ax, bar = fig.axes
    assert ax.get_xlabel() == "predicted C_A [mol/L]" and ax.get_ylabel() == "observed C_A [mol/L]"
    assert bar.get_ylabel() == "effective temperature of the batch (or run) [°C]"
    used, left_out = ax.collections[:2]
    assert len(used.get_offsets()) == fit.n_assays == 35
    # each point coloured by its batch's effective temperature
    temps = np.concatenate(
        [
            np.full(int(r["used"].sum()), fit.series_temperature_k[r["name"]] - 273.15)
            for r in fit.residuals
        ]
    )
    np.testing.assert_allclose(used.get_array(), temps)
    assert sorted(set(np.round(temps))) == [67.0, 77.0]
    (b, t_s, _, _) = fit.excluded[0]
    assert len(left_out.get_offsets()) == 1
    assert [t.get_text() for t in ax.texts] == [f"{b} at {t_s / 3600:.1f} h"] == ["B2 at 3.2 h"]
    _labels_have_units(fig)


def test_residual_plot_has_time_units_and_the_stated_error_band(plotted_fit):
    fig = plots.residual_figure(plotted_fit, "concentration", sd_stated=True)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "time since batch start [h]"
    assert ax.get_ylabel() == "observed − predicted C_A [mol/L]"
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend[0] == "±2σ stated assay error (0.02 mol/L)"
    assert ax.patches  # the band
    _labels_have_units(fig)
    conversion = plots.residual_figure(plotted_fit, "conversion", sd_stated=False).axes[0]
    assert conversion.get_ylabel() == "observed − predicted X [-]"
    assert conversion.get_legend().get_texts()[0].get_text().startswith("±2 × RMSE")


def test_arrhenius_plot_line_band_and_batches(plotted_fit):
    fit = plotted_fit
    points = plots.plant_arrhenius_points(fit)
    assert [p.name for p in points] == [f"B{b}" for b in range(6)]
    p0 = points[0]  # activity x k(T_eff) at the batch's effective temperature
    k_line = math.exp(ln_k_band(fit, [p0.T_K])[0][0])
    assert p0.k == pytest.approx(fit.activity["B0"] * k_line, rel=1e-12)
    fig = plots.arrhenius_figure(fit, points, "batch", plots.PLANT_NOTE)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "1000 / T [1/K]"
    assert ax.get_ylabel() == "ln(k / [L/(mol·s)])"
    assert ax.child_axes[0].get_xlabel() == "T [°C]"
    line = ax.lines[0]
    T = 1000.0 / line.get_xdata()
    np.testing.assert_allclose(line.get_ydata(), ln_k_band(fit, T)[0], rtol=1e-12)
    assert any("Poly" in type(c).__name__ for c in ax.collections)  # the 95 % band
    assert sorted(t.get_text() for t in ax.texts) == [p.name for p in points]
    assert "Ea " in ax.get_title() and "L/(mol·s) at" in ax.get_title()
    _labels_have_units(fig)


def test_write_plots_writes_the_arrhenius_plot_only_with_two_temperatures(plotted_fit, tmp_path):
    fit = plotted_fit
    points = plots.plant_arrhenius_points(fit)
    written = plots.write_plots(fit, tmp_path / "k.toml", arrhenius=points)
    assert set(written) == {"parity", "residuals", "arrhenius"}
    for path in written.values():
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    one_t = [p for p in points if p.T_K > 345.0]
    assert set(plots.write_plots(fit, tmp_path / "j.toml", arrhenius=one_t)) == {
        "parity",
        "residuals",
    }
