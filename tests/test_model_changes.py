"""Kinetics or configuration changes take effect (issue #10, item 3).

On the tiny site (one running batch, no new data between cycles): a changed kinetics
file or recipe configuration re-estimates the running batch on the next cycle, the
re-estimate at the same data time is stored beside the first and is the one `status`
shows; a file that does not load leaves the old one in use with a logged error;
`status` says when a stored estimate was made with other kinetics or configuration.
Before this change the monitor loaded each recipe's kinetics once, the cycle skipped a
batch without new data, the store refused a second estimate at one (batch, at_s) and
`status` had no ``kinetics_current``: each test here failed.
"""

from __future__ import annotations

import logging
import os
import tomllib

import pytest
import tomli_w

from monitor import api
from monitor.config import load_config, load_kinetics
from monitor.service.cycle import Monitor
from tests.store_compare import read_store
from tests.tiny_site import KINETICS, last_data_s, write_site

LAST = last_data_s(2)


@pytest.fixture
def site(tmp_path):
    """The tiny site with a complete and a running batch, and a monitor after one cycle."""
    config = write_site(tmp_path / "site", ["B-1", "B-2"])
    mon = Monitor(load_config(config), clock=lambda: LAST + 60.0)
    rep = mon.cycle()
    assert rep.estimates_added == 1 and list(mon.states) == ["B-2"]
    yield config, mon
    mon.store.close()
    mon.reader.close()


def _rewrite(path, data: dict) -> None:
    """Write a file and move its modification time on (a coarse clock cannot hide it)."""
    before = os.stat(path).st_mtime_ns if path.exists() else 0
    path.write_text(tomli_w.dumps(data), encoding="utf-8")
    os.utime(path, ns=(before + 1_000_000_000, before + 1_000_000_000))


def _estimates(mon) -> list[dict]:
    rows = read_store(mon.store)["estimates"].values()
    return sorted(rows, key=lambda r: r["id"])


def test_changed_kinetics_re_estimate_without_new_data(site):
    config, mon = site
    kin_path = config.parent / "ax.toml"
    old = load_kinetics(kin_path).version
    _rewrite(kin_path, {**KINETICS, "k_ref": KINETICS["k_ref"] * 1.5})
    new = load_kinetics(kin_path).version
    assert new != old
    seq = mon.watermark["seq"]
    rep = mon.cycle()  # nothing was added to the export
    assert mon.watermark["seq"] == seq and rep.estimates_added == 1
    first, second = _estimates(mon)
    assert first["at_s"] == second["at_s"] == LAST  # one data time, two estimates
    assert (first["kinetics_version"], second["kinetics_version"]) == (old, new)
    assert second["conversion"] > first["conversion"]  # a faster reaction: further on
    row = api.status(mon.cfg)["status"][0]
    assert row["kinetics_version"] == new and row["kinetics_current"] is True
    assert mon.cycle().estimates_added == 0  # nothing changed since: nothing added


def test_changed_back_the_first_estimate_is_the_newest_again(site):
    config, mon = site
    kin_path = config.parent / "ax.toml"
    original = load_kinetics(kin_path).version
    mon.clock = lambda: LAST + 120.0
    _rewrite(kin_path, {**KINETICS, "k_ref": KINETICS["k_ref"] * 1.5})
    mon.cycle()
    mon.clock = lambda: LAST + 180.0
    _rewrite(kin_path, KINETICS)
    assert mon.cycle().estimates_added == 0  # stored already: not added twice
    assert api.status(mon.cfg)["status"][0]["kinetics_version"] == original
    computed = {r["kinetics_version"]: r["computed_s"] for r in _estimates(mon)}
    assert computed[original] == LAST + 180.0


def test_changed_recipe_configuration_re_estimates(site):
    config, mon = site
    data = tomllib.loads(config.read_text())
    data["recipes"]["AX"]["target_conversion"] = 0.90
    _rewrite(config, data)
    assert mon.cycle().estimates_added == 1
    first, second = _estimates(mon)
    assert first["kinetics_version"] == second["kinetics_version"]
    assert first["config_version"] != second["config_version"]
    assert (first["target_conversion"], second["target_conversion"]) == (0.95, 0.90)
    row = api.status(load_config(config))["status"][0]
    assert row["target_conversion"] == 0.90 and row["config_current"] is True


def test_a_new_file_that_does_not_load_leaves_the_old_one_in_use(site, caplog):
    config, mon = site
    kin_path = config.parent / "ax.toml"
    version = load_kinetics(kin_path).version
    _rewrite(kin_path, {**KINETICS, "ea_j_per_mol": -68000.0})
    with caplog.at_level(logging.ERROR, logger="monitor"):
        assert mon.cycle().estimates_added == 0
    assert "kinetics file changed but not loaded" in caplog.text and "ea_j_per_mol" in caplog.text
    assert mon.states["B-2"].kinetics.version == version
    data = tomllib.loads(config.read_text())
    data["recipes"]["AX"]["bogus"] = 1
    caplog.clear()
    _rewrite(config, data)
    with caplog.at_level(logging.ERROR, logger="monitor"):
        assert mon.cycle().estimates_added == 0
        assert mon.cycle().estimates_added == 0
    assert caplog.text.count("configuration changed but not loaded") == 1  # once per version
    assert "bogus" in caplog.text
    row = api.status(mon.cfg)["status"][0]  # the file as it is now cannot be used
    assert row["kinetics_current"] is None
    assert "kinetics file cannot be used now" in row["warnings"][0]


def test_a_changed_store_or_historian_waits_for_a_restart(site, caplog):
    config, mon = site
    data = tomllib.loads(config.read_text())
    data["store"]["url"] = f"sqlite:///{config.parent / 'other.db'}"
    data["recipes"]["AX"]["target_conversion"] = 0.90
    _rewrite(config, data)
    with caplog.at_level(logging.ERROR, logger="monitor"):
        assert mon.cycle().estimates_added == 0
    assert "[store]" in caplog.text and "applies only when the monitor starts" in caplog.text
    assert mon.cfg.recipe("AX").target_conversion == 0.95  # nothing of the file applied


def test_status_says_when_an_estimate_was_made_with_other_kinetics(site):
    """Between the file's change and the monitor's next cycle, `status` says so."""
    config, mon = site
    kin_path = config.parent / "ax.toml"
    made = load_kinetics(kin_path).version
    _rewrite(kin_path, {**KINETICS, "activity_sd": 0.2})
    now = load_kinetics(kin_path).version
    row = api.status(load_config(config))["status"][0]
    assert row["kinetics_version"] == made and row["kinetics_current"] is False
    assert row["config_current"] is True
    assert row["warnings"][0].startswith(f"not current: made with kinetics {made}")
    assert now in row["warnings"][0]
    data = tomllib.loads(config.read_text())
    data["estimator"] = {"mismatch_sigma": 3.0}
    _rewrite(config, data)
    row = api.status(load_config(config))["status"][0]
    assert row["config_current"] is False
    assert any("another configuration" in w for w in row["warnings"])


def test_an_alert_raised_again_at_the_same_data_time_is_reopened(site):
    """Kinetics contradicted by every assay, fixed, then broken again, with no new data:
    the model-contradicted alert is raised, cleared and raised again at one data time
    (the store's key for alerts is batch, kind and data time: it is reopened)."""
    config, mon = site
    kin_path = config.parent / "ax.toml"
    wrong = {**KINETICS, "k_ref": KINETICS["k_ref"] * 20}
    _rewrite(kin_path, wrong)
    mon.cycle()
    mon.refresh_alert_ids()
    kinds = sorted(a["kind"] for a in mon.store.open_alerts())
    assert kinds == ["assay_mismatch", "model_contradicted"]
    _rewrite(kin_path, KINETICS)
    mon.cycle()
    mon.refresh_alert_ids()
    assert mon.store.open_alerts() == []
    _rewrite(kin_path, wrong)
    rep = mon.cycle()
    mon.refresh_alert_ids()
    assert rep.alerts_added == 0
    alerts = mon.store.list_alerts()
    assert sorted(a["kind"] for a in alerts) == kinds  # the same two rows, open again
    assert all(a["state"] == "open" and a["cleared_at_s"] is None for a in alerts)


def test_a_restart_without_changes_leaves_the_estimates_as_they_were(site):
    """A restarted monitor re-estimates its running batches (nothing in memory) and finds
    each estimate stored: nothing added, nothing moved, at any clock."""
    config, mon = site
    before = _estimates(mon)
    again = Monitor(load_config(config), clock=lambda: LAST + 3600.0)
    try:
        assert again.cycle().estimates_added == 0
        assert _estimates(again) == before
    finally:
        again.store.close()
        again.reader.close()
