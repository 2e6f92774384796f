"""The commands on the generated sample plant, checked against the generator's own truth."""

from __future__ import annotations

import json
from datetime import datetime

import pytest

from monitor.api import estimate_batch
from monitor.config import load_config
from monitor.service.cycle import Monitor
from tests.cli_runner import convmon
from tests.store_compare import compare_stores


def test_batches_json_matches_the_generator(sample_plant):
    r = convmon("batches", "--config", str(sample_plant.config_path), "--json")
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    got = {b["batch"]: b for b in doc["batches"]}
    want = {b["batch"]: b for b in sample_plant.truth["batches"]}
    assert set(got) == set(want)
    keys = {"batch", "unit", "recipe", "start", "end", "state", "n_temperature", "n_assays"}
    for bid, b in got.items():
        assert keys <= set(b)
        t = want[bid]
        assert (b["unit"], b["recipe"], b["state"]) == (t["unit"], t["recipe"], t["state"])
        assert datetime.fromisoformat(b["start"]) == datetime.fromisoformat(t["start"])
        if t["end"] is None:
            assert b["end"] is None
        else:
            assert datetime.fromisoformat(b["end"]) == datetime.fromisoformat(t["end"])
        assert b["n_temperature"] > 100 and b["n_assays"] >= 1


def test_estimate_of_running_batches_against_truth(sample_plant):
    """Running batches at the export's end: conversion within the generator's truth ± 0.03
    and a P10-P90 band that holds the true time to target (issue acceptance)."""
    cfg = load_config(sample_plant.config_path)
    running = [b for b in sample_plant.truth["batches"] if b["state"] == "running"]
    assert running
    for tb in running:
        est, _ = estimate_batch(cfg, tb["batch"])
        assert abs(est.conversion - tb["conversion_at_export_end"]) < 0.03, tb["batch"]
        t_true = datetime.fromisoformat(tb["time_to_target"]).timestamp()
        assert est.predicted_end_p10_s <= t_true <= est.predicted_end_p90_s, tb["batch"]


def test_estimate_json_keys_and_at(sample_plant):
    bid = next(b["batch"] for b in sample_plant.truth["batches"] if b["state"] == "complete")
    r = convmon("estimate", "--batch", bid, "--config", str(sample_plant.config_path), "--json")
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    for k in (
        "batch",
        "unit",
        "recipe",
        "at",
        "start",
        "conversion",
        "conversion_sd",
        "activity",
        "activity_sd",
        "target_conversion",
        "predicted_end",
        "predicted_end_p10",
        "predicted_end_p90",
        "forecast_note",
        "n_assays_used",
        "warnings",
    ):
        assert k in doc
    bad = convmon("estimate", "--batch", "NO-SUCH", "--config", str(sample_plant.config_path))
    assert bad.exit_code == 2 and "NO-SUCH" in bad.stderr


def test_run_once_twice_adds_nothing_the_second_time(sample_plant, tmp_path):
    """Two cycles with a restart between leave the store a single cycle leaves.

    Compared with a store made independently by one cycle (another file), every column
    of every table; only the heartbeat's cycle count may differ (2 against 1).
    """

    def config(store: str):
        cfg_text = sample_plant.config_path.read_text().replace(
            str(sample_plant.config_path.parent / "convmon.db"), str(tmp_path / store)
        )
        p = tmp_path / f"{store}.toml"
        p.write_text(cfg_text)
        return load_config(p)

    end = datetime.fromisoformat(sample_plant.truth["export_end"]).timestamp()
    clock = lambda: end + 60.0  # noqa: E731 - the same injected time for every run
    twice = config("twice.db")
    first = Monitor(twice, clock=clock).cycle()
    assert first.estimates_added >= 1
    again = Monitor(twice, clock=clock)
    second = again.cycle()
    assert second.estimates_added == 0 and second.alerts_added == 0
    once = Monitor(config("once.db"), clock=clock)
    once.cycle()
    diffs = compare_stores(
        again.store,
        once.store,
        exclude={"heartbeat.cycles": "two cycles against one: checked below"},
    )
    assert not diffs, "\n".join(diffs[:20])
    assert (again.store.heartbeat()["cycles"], once.store.heartbeat()["cycles"]) == (2, 1)


def test_second_run_on_same_store_refuses(sample_plant):
    from monitor.errors import LockError
    from monitor.service.lock import store_lock

    cfg = load_config(sample_plant.config_path)
    with store_lock(cfg.store.url), pytest.raises(LockError), store_lock(cfg.store.url):
        pass


def test_forecast_calibration_over_the_sample_history(sample_plant):
    """Mid-batch (at the third assay) over every complete batch of the sample plant.

    The generator's truth is independent of the estimator (its own solve_ivp path). An
    80 % band (P10-P90) should hold the true time to target in about 80 % of batches;
    we require 60-95 % so the check is neither trivially passed nor flaky.
    """
    from monitor.api import open_reader

    cfg = load_config(sample_plant.config_path)
    reader = open_reader(cfg)
    inside, dx, n = 0, [], 0
    try:
        for tb in sample_plant.truth["batches"]:
            if tb["state"] != "complete" or len(tb["assays"]) < 4:
                continue
            a = tb["assays"][2]
            at = datetime.fromisoformat(a["ts"]).timestamp() + 1.0
            est, _ = estimate_batch(cfg, tb["batch"], at, reader=reader)
            t_true = datetime.fromisoformat(tb["time_to_target"]).timestamp()
            n += 1
            inside += (
                est.predicted_end_p10_s is not None
                and est.predicted_end_p10_s <= t_true <= est.predicted_end_p90_s
            )
            dx.append(abs(est.conversion - a["true_conversion"]))
    finally:
        reader.close()
    assert n >= 40
    print(
        f"\ncalibration: P10-P90 holds the true end in {inside}/{n} batches; "
        f"|X - X_true| mean {sum(dx) / n:.4f}, max {max(dx):.4f}"
    )
    assert 0.60 <= inside / n <= 0.95
    assert max(dx) < 0.03
