"""`convmon run` as a process: scheduler, heartbeat, clean SIGTERM, one instance per store."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time

from tests.cli_runner import convmon


def _config(sample_plant, tmp_path) -> str:
    text = sample_plant.config_path.read_text().replace(
        str(sample_plant.config_path.parent / "convmon.db"), str(tmp_path / "store.db")
    )
    assert "interval_s = 30" in text
    p = tmp_path / "c.toml"
    p.write_text(text.replace("interval_s = 30", "interval_s = 1"))
    return str(p)


def test_run_polls_on_schedule_and_stops_on_sigterm(sample_plant, tmp_path):
    cfg = _config(sample_plant, tmp_path)
    proc = subprocess.Popen(
        [sys.executable, "-m", "monitor", "run", "--config", cfg],
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        deadline = time.time() + 60
        beat = None
        while time.time() < deadline:
            time.sleep(1.0)
            r = convmon("status", "--json", "--config", cfg)
            if r.exit_code == 0:
                beat = json.loads(r.stdout)["heartbeat"]
                if beat["cycles"] >= 2:
                    break
        assert beat and beat["cycles"] >= 2 and beat["last_good_cycle"]
        second = convmon("run", "--once", "--config", cfg)
        assert second.exit_code == 3 and "already" in second.stderr
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=30) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
    doc = json.loads(convmon("status", "--json", "--config", cfg).stdout)
    running = {b["batch"] for b in sample_plant.truth["batches"] if b["state"] == "running"}
    assert {r["batch"] for r in doc["status"]} == running
    for r in doc["status"]:
        assert isinstance(r["alerts"], list)


def test_watch_prints_plain_lines_off_a_terminal(sample_plant, tmp_path):
    cfg = _config(sample_plant, tmp_path)
    from monitor.config import load_config
    from monitor.service.cycle import Monitor

    Monitor(load_config(cfg)).cycle()
    r = convmon("watch", "--config", cfg, "--count", "2", "--interval", "0.1")
    assert r.exit_code == 0, r.stderr
    lines = r.stdout.strip().splitlines()
    running = [b["batch"] for b in sample_plant.truth["batches"] if b["state"] == "running"]
    assert len(lines) == 2 * (1 + len(running))
    assert all(any(b in line for line in lines) for b in running)
    assert "\x1b[" not in r.stdout  # no terminal control codes in a pipe


def test_stale_feed_raises_an_alert_and_unchanged_batches_are_not_re_estimated(
    sample_plant, tmp_path, monkeypatch
):
    from datetime import datetime

    import monitor.service.cycle as service
    from monitor.config import load_config
    from monitor.service.cycle import Monitor

    cfg = load_config(_config(sample_plant, tmp_path))
    end = datetime.fromisoformat(sample_plant.truth["export_end"]).timestamp()
    clock = {"t": end + 60.0}
    mon = Monitor(cfg, clock=lambda: clock["t"])
    mon.run_cycle_safely()
    assert not [a for a in mon.store.open_alerts() if a["kind"] == "stale_data"]
    calls = []
    real = service.estimate
    monkeypatch.setattr(service, "estimate", lambda *a, **k: calls.append(1) or real(*a, **k))
    clock["t"] = end + 2 * 3600.0  # the feed stopped two hours ago
    rep = mon.run_cycle_safely()
    assert rep.estimates_added == 0 and calls == []  # nothing new: nothing recomputed
    stale = [a for a in mon.store.open_alerts() if a["kind"] == "stale_data"]
    running = {b["batch"] for b in sample_plant.truth["batches"] if b["state"] == "running"}
    assert {a["batch"] for a in stale} == running
    assert all(a["message"].endswith(("2 h", "1 h 59 min")) for a in stale)


def test_alerts_list_and_ack(sample_plant, tmp_path):
    from datetime import datetime

    from monitor.config import load_config
    from monitor.service.cycle import Monitor

    cfg_path = _config(sample_plant, tmp_path)
    cfg = load_config(cfg_path)
    end = datetime.fromisoformat(sample_plant.truth["export_end"]).timestamp()
    mon = Monitor(cfg, clock=lambda: end + 7200.0)  # a stopped feed: stale-data alerts
    mon.run_cycle_safely()

    def cli(*args):
        return convmon("alerts", *args, "--config", cfg_path)

    doc = json.loads(cli("--open", "--json").stdout)
    keys = {
        "id",
        "batch",
        "kind",
        "severity",
        "state",
        "raised_at",
        "cleared_at",
        "acked_by",
        "message",
    }
    assert doc["alerts"] and all(keys <= set(a) for a in doc["alerts"])
    first = doc["alerts"][0]
    r = cli("ack", str(first["id"]), "--by", "shift-lead")
    assert r.exit_code == 0, r.stderr
    again = {a["id"]: a for a in json.loads(cli("--open", "--json").stdout)["alerts"]}
    assert again[first["id"]]["acked_by"] == "shift-lead"
    assert again[first["id"]]["state"] == "acked"  # still active: its condition holds
    mon.run_cycle_safely()  # an acknowledged alert is not raised a second time
    assert len(json.loads(cli("--json").stdout)["alerts"]) == len(doc["alerts"])
    assert cli("ack", "99999", "--by", "x").exit_code == 2
    assert cli("ack", str(first["id"])).exit_code == 2  # --by is required
