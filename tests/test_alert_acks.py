"""Acknowledgements are a history (issue #10, item 9).

``alerts ack ID --by NAME [--note TEXT]`` appends who, when (the wall clock, injected
here) and the note; a second acknowledgement adds a row and never replaces the first;
``alerts --json`` lists them as ``acks`` and keeps ``acked_by`` (the latest). Before
this change a second ``ack`` overwrote the single ``acked_by`` name and no time was
kept: these tests failed.
"""

from __future__ import annotations

import json

from monitor import api
from monitor.config import load_config
from monitor.service.cycle import Monitor
from monitor.store import Store
from monitor.timefmt import iso
from tests.cli_runner import convmon
from tests.test_cli import one_error_line
from tests.tiny_site import last_data_s, write_site

T_ACK = 1_791_400_000.5


def _raise_one(store: Store) -> int:
    store.commit_cycle(
        watermark={"mode": "seq", "seq": 1},
        batch_rows=[],
        estimate_rows=[],
        alert_changes=[
            {
                "op": "raise",
                "batch": "B-1",
                "kind": "stale_data",
                "severity": "warning",
                "state": "open",
                "raised_at_s": T_ACK - 3600.0,
                "message": "no new temperature sample for 1 h",
            }
        ],
        kinetics_rows=[],
        now_s=T_ACK - 3600.0,
        last_data_s=None,
    )
    return store.list_alerts()[0]["id"]


def test_a_second_acknowledgement_adds_to_the_history(store_url):
    """On SQLite, PostgreSQL and MariaDB: two acknowledgements, both kept, in order."""
    store = Store(store_url)
    try:
        alert_id = _raise_one(store)
        store.ack_alert(alert_id, "night shift", T_ACK, "sampled again at 02:10")
        second = store.ack_alert(alert_id, "Åsa Ødegård — day shift", T_ACK + 60.0)
        assert second["state"] == "acked"
        assert second["acks"] == [
            {"acked_by": "night shift", "acked_at_s": T_ACK, "note": "sampled again at 02:10"},
            {"acked_by": "Åsa Ødegård — day shift", "acked_at_s": T_ACK + 60.0, "note": None},
        ]
        assert store.list_alerts()[0]["acks"] == second["acks"]
        assert store.open_alerts()[0]["id"] == alert_id  # still active until it clears
    finally:
        store.close()


def test_alerts_ack_through_the_command_line(tmp_path):
    config = write_site(tmp_path / "site", ["B-1", "B-2"])
    cfg = load_config(config)
    Monitor(cfg, clock=lambda: last_data_s(2) + 7200.0).run_cycle_safely()  # stale data
    (alert,) = api.list_alerts(cfg)["alerts"]
    assert alert["acks"] == [] and alert["acked_by"] is None

    clock = iter([T_ACK, T_ACK + 90.0])
    first = api.ack_alert(
        cfg, alert["id"], "night shift", "called the lab", clock=lambda: next(clock)
    )
    assert first["acks"] == [{"by": "night shift", "at": iso(T_ACK), "note": "called the lab"}]
    api.ack_alert(cfg, alert["id"], "day shift", clock=lambda: next(clock))

    r = convmon("alerts", "ack", str(alert["id"]), "--by", "engineer", "--note", "kinetics ok",
                "--config", config)  # fmt: skip
    assert r.exit_code == 0, r.stderr
    assert "acknowledged by engineer (3 acknowledgements in all)" in r.stdout
    doc = json.loads(convmon("alerts", "--json", "--config", config).stdout)
    (listed,) = doc["alerts"]
    assert [k["by"] for k in listed["acks"]] == ["night shift", "day shift", "engineer"]
    assert listed["acked_by"] == "engineer"  # the latest, for scripts
    assert [k["at"] for k in listed["acks"][:2]] == [iso(T_ACK), iso(T_ACK + 90.0)]
    assert listed["acks"][2]["at"] is not None  # the wall clock of the command
    assert [k["note"] for k in listed["acks"]] == ["called the lab", None, "kinetics ok"]


def test_an_empty_name_is_refused(tmp_path):
    config = write_site(tmp_path / "site", ["B-1"])
    Monitor(load_config(config), clock=lambda: last_data_s(1) + 7200.0).run_cycle_safely()
    r = convmon("alerts", "ack", "1", "--by", "  ", "--config", config)
    assert r.exit_code == 2 and "--by" in one_error_line(r)
