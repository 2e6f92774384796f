"""The commands on the generated sample plant, checked against the generator's own truth."""

from __future__ import annotations

import json
import tomllib
from datetime import UTC, datetime

import pytest

from monitor.api import estimate_batch
from monitor.config import load_config
from monitor.service.cycle import Monitor
from sample_historian.replay import LiveFile, Replay
from tests.cli_runner import convmon
from tests.fixtures_plant import PLANT_CONFIG, write_config
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


#: P10-P90 coverage measured on the default sample plant with arrival honoured, and the
#: batches it may move by (a change in the estimator, the forecast or the generator
#: moves it a little; more is a change to look at, in either direction).
CALIBRATION_INSIDE = 53  # regression (85 %)
CALIBRATION_BATCHES = 62  # regression
CALIBRATION_TOLERANCE = 3  # batches
#: Mean and largest |X - X_true| at those moments, and how far they may move.
CONVERSION_ERROR_MEAN = 0.0079  # regression
CONVERSION_ERROR_MAX = 0.0435  # regression


def _iso_ms(t_s: float) -> str:
    """Epoch seconds as the sample export writes times (ISO 8601, milliseconds, UTC)."""
    return datetime.fromtimestamp(t_s, tz=UTC).isoformat(timespec="milliseconds")


def _as_arrived(replay: Replay, tb: dict, tags: list[str], at_s: float, path) -> None:
    """An export holding one batch's rows as they had *arrived* by plant time ``at_s``.

    A row has arrived when its ``seq`` is at most that of the newest temperature row
    stamped at or before ``at_s`` (`Replay.cut`, the rule of every replay); events up
    to ``at_s``. Rows of the batch's unit from its start only: nothing else is read.
    """
    live = LiveFile(path, replay.src)
    cut = replay.cut(at_s)
    start = datetime.fromisoformat(tb["start"]).timestamp()
    marks = ",".join("?" * len(tags))
    live.append_samples(
        replay.src.execute(
            "SELECT seq, tag, ts, value, quality FROM tag_samples "
            f"WHERE seq <= ? AND tag IN ({marks}) AND ts >= ? AND ts <= ?",
            (cut, *tags, _iso_ms(start), _iso_ms(at_s)),
        ).fetchall()
    )
    live.append_events(
        replay.src.execute(
            "SELECT seq, batch_id, unit, recipe, event, ts FROM batch_events "
            "WHERE batch_id = ? AND ts <= ?",
            (tb["batch"], _iso_ms(at_s)),
        ).fetchall()
    )
    live.close()


def test_forecast_calibration_over_the_sample_history(sample_plant, tmp_path):
    """Mid-batch, at the third assay's sample time, over every complete batch of the
    sample plant, with only what had *arrived* in the historian by then.

    The lab reports 20-60 min after sampling, so at that moment the third assay (and
    often the second) is not in the export yet: the estimate is the one a live monitor
    showed then (at the newest temperature sample), from the assays that had arrived.
    The generator's truth is independent of the estimator (its own solve_ivp path); an
    80 % band (P10-P90) should hold the true time to target in about 80 % of batches.
    The count is pinned as a regression value with a tolerance of a few batches. (It
    was computed before with every row stamped up to the sample time, arrived or not:
    48 of 62, and only 60-95 % was asserted.)
    """
    plant = tomllib.loads(sample_plant.config_path.read_text())
    tags_of = {
        u["name"]: [u["temperature_tag"], u["assay_tag"], u["charge_tag"]] for u in plant["units"]
    }
    replay = Replay(
        sample_plant.db_path, _Nowhere(), [u["temperature_tag"] for u in plant["units"]]
    )
    inside, dx, used, n = 0, [], [], 0
    try:
        for i, tb in enumerate(sample_plant.truth["batches"]):
            if tb["state"] != "complete" or len(tb["assays"]) < 4:
                continue
            a = tb["assays"][2]
            at = datetime.fromisoformat(a["ts"]).timestamp() + 1.0
            db = tmp_path / f"b{i}.db"
            _as_arrived(replay, tb, tags_of[tb["unit"]], at, db)
            cfg = load_config(write_config(PLANT_CONFIG, db, tmp_path / f"b{i}.toml"))
            est, _ = estimate_batch(cfg, tb["batch"])  # running then: at its newest sample
            assert at - 60.0 < est.at_s <= at
            t_true = datetime.fromisoformat(tb["time_to_target"]).timestamp()
            n += 1
            inside += (
                est.predicted_end_p10_s is not None
                and est.predicted_end_p10_s <= t_true <= est.predicted_end_p90_s
            )
            dx.append(abs(est.conversion - a["true_conversion"]))
            used.append(est.n_assays_used)
    finally:
        replay.src.close()
    print(
        f"\ncalibration (arrival honoured): P10-P90 holds the true end in {inside}/{n} "
        f"batches ({inside / n:.0%}); assays used {min(used)}-{max(used)} "
        f"(mean {sum(used) / n:.2f}); |X - X_true| mean {sum(dx) / n:.4f}, max {max(dx):.4f}"
    )
    assert max(used) < 3  # the third assay had not arrived anywhere
    assert n == CALIBRATION_BATCHES
    assert abs(inside - CALIBRATION_INSIDE) <= CALIBRATION_TOLERANCE
    assert sum(dx) / n == pytest.approx(CONVERSION_ERROR_MEAN, abs=0.002)
    assert max(dx) == pytest.approx(CONVERSION_ERROR_MAX, abs=0.01)


class _Nowhere:
    """A replay destination that keeps nothing (only `Replay.cut` is used)."""

    def append_samples(self, rows) -> None:
        raise AssertionError("nothing is replayed here")

    def append_events(self, rows) -> None:
        raise AssertionError("nothing is replayed here")
