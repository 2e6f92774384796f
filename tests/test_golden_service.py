"""The poll cycle with golden profiles, on the sample plant (invented data).

The profile of CPL-3 is built from its eight fastest good batches only, so the
running CPL-3 batch (a slow one, by the sample plant's draw) is clearly behind
it: the alerts it raises are the lifecycle under test, not a calibration claim.
"""

from __future__ import annotations

import json
import logging
from datetime import datetime

import pytest

from monitor import api
from monitor.config import load_config
from monitor.outputs.terminal import status_lines
from monitor.service.cycle import Monitor
from monitor.store import Store
from tests.cli_runner import convmon
from tests.fixtures_plant import write_plant_config

GOLDEN = {"behind_profile", "late_finish", "temperature_off_profile", "low_activity"}


@pytest.fixture
def site(sample_plant, tmp_path):
    cfg = load_config(write_plant_config(sample_plant.db_path, tmp_path))
    end = datetime.fromisoformat(sample_plant.truth["export_end"]).timestamp()
    fast = sorted(
        (
            b
            for b in sample_plant.truth["batches"]
            if b["recipe"] == "CPL-3" and b["state"] == "complete"
        ),
        key=lambda b: b["time_to_target_h"],
    )[:8]
    return cfg, end, [b["batch"] for b in fast]


def _golden_alerts(cfg) -> list[dict]:
    return [a for a in api.list_alerts(cfg)["alerts"] if a["kind"] in GOLDEN]


def test_a_new_profile_applies_on_the_next_cycle_and_alerts_survive_restarts(site):
    cfg, end, fast = site
    clock = lambda: end + 60.0  # noqa: E731  (no new data after the first cycle)
    Monitor(cfg, clock=clock).run_cycle_safely()
    assert _golden_alerts(cfg) == []
    before = {r["batch"]: r for r in api.status(cfg)["status"]}
    assert all(r.get("golden") is None for r in before.values())

    monitor = Monitor(cfg, clock=clock)
    monitor.run_cycle_safely()  # the same data, no profile yet: nothing
    out = api.golden_build(cfg, "CPL-3", batches=fast, now_s=end)
    assert out.stored and out.profile.version == 1
    rep = monitor.run_cycle_safely()  # no new data: the new profile still applies
    assert rep.estimates_added == 0
    raised = _golden_alerts(cfg)
    assert raised and {a["batch"] for a in raised} == {"TW26-0063"}
    behind = next(a for a in raised if a["kind"] == "behind_profile")
    assert "behind the median good batch" in behind["message"]
    assert "good batches 0." in behind["message"]

    # a restart (a new process: in-memory state gone) adds nothing and keeps them open
    for _ in range(2):
        Monitor(cfg, clock=clock).run_cycle_safely()
    again = _golden_alerts(cfg)
    assert [(a["id"], a["kind"], a["state"]) for a in again] == [
        (a["id"], a["kind"], a["state"]) for a in raised
    ]


def test_status_shows_how_far_a_batch_is_from_the_band(site):
    cfg, end, fast = site
    api.golden_build(cfg, "CPL-3", batches=fast, now_s=end)
    Monitor(cfg, clock=lambda: end + 60.0).run_cycle_safely()
    doc = api.status(cfg)
    rows = {r["batch"]: r for r in doc["status"]}
    g = rows["TW26-0063"]["golden"]
    assert g["profile_version"] == 1 and g["lag_min"] > g["lag_limit_min"] > 0
    assert "behind_profile" in g["off_profile"]
    assert rows["TW26-0064"].get("golden") is None  # DIM-7 has no profile
    line = next(x for x in status_lines(doc, "UTC", end + 60.0) if "TW26-0063" in x)
    assert f"golden_lag=+{g['lag_min']:.0f}min!" in line
    r = convmon("status", "--config", str(cfg.path))
    assert r.exit_code == 0 and "vs golden" in r.stdout


def test_a_profile_of_other_kinetics_is_not_applied(site, caplog, tmp_path):
    """Activities and bands depend on the kinetics: a profile built with others waits
    for a rebuild, and the monitor says so once."""
    cfg, end, fast = site
    out = api.golden_build(cfg, "CPL-3", batches=fast, now_s=end)
    store = Store(cfg.store.url)
    try:
        doc = out.profile.to_dict()
        doc["kinetics_version"] = "0123456789ab"
        store.save_golden_profile(type(out.profile).from_dict(doc))
    finally:
        store.close()
    with caplog.at_level(logging.WARNING, logger="monitor.service.golden_watch"):
        m = Monitor(cfg, clock=lambda: end + 60.0)
        m.run_cycle_safely()
        m.run_cycle_safely()
    assert _golden_alerts(cfg) == []
    warned = [r for r in caplog.records if "not applied" in r.getMessage()]
    assert len(warned) == 1 and "golden build --recipe CPL-3" in warned[0].getMessage()


def test_golden_commands_build_show_and_chart(site, tmp_path):
    cfg, end, fast = site
    r = convmon(
        "golden", "build", "--config", str(cfg.path), "--recipe", "CPL-3",
        "--batches", ",".join(fast), "--json",
    )  # fmt: skip
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["stored"] and doc["version"] == 1 and doc["batches"] == sorted(fast)
    assert doc["calibration"]["all"]["n"] == 8
    assert set(doc["rules"]) == GOLDEN
    chart = tmp_path / "golden.png"
    r = convmon(
        "golden", "show", "--config", str(cfg.path), "--recipe", "CPL-3", "--chart", str(chart)
    )
    assert r.exit_code == 0, r.stderr
    assert chart.stat().st_size > 20_000
    assert "golden profile CPL-3 v1" in r.stdout and "not a safety or control system" in r.stdout
    r = convmon("golden", "show", "--config", str(cfg.path), "--recipe", "NOPE")
    assert r.exit_code == 2
