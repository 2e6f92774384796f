"""The command line itself: help with examples that run, exit codes, one-line errors, JSON.

Most cases run in this process through click's CliRunner; a few run the real console
script or ``python -m monitor`` to check what a shell sees.
"""

from __future__ import annotations

import json
import os
import re
import shlex
import signal
import subprocess
import sys
import textwrap
from datetime import datetime
from pathlib import Path

import click
import pytest

from monitor import __version__, api
from monitor.cli import COMMANDS, cli, main
from monitor.config import load_config
from monitor.errors import (
    EXIT_CODES,
    INTERRUPTED,
    ConfigError,
    HistorianError,
    IntegrityError,
    StoreError,
)
from monitor.service.cycle import Monitor
from tests.cli_runner import convmon
from tests.fixtures_plant import write_plant_config

SAMPLE_CONFIG = "config/sample_plant.toml"

BASE = """
[historian]
url = "sqlite:///plant.db"

[[units]]
name = "R-1"
temperature_tag = "R1.TT"

[recipes.AX]
kinetics = "k.toml"
"""


def write_config(tmp_path: Path, text: str = BASE) -> Path:
    p = tmp_path / "convmon.toml"
    p.write_text(textwrap.dedent(text))
    return p


def all_commands(group: click.Group = cli, path: tuple[str, ...] = ()):
    """Every command and subcommand as (path, command), groups included."""
    ctx = click.Context(group)
    for name in group.list_commands(ctx):
        command = group.get_command(ctx, name)
        yield (*path, name), command
        if isinstance(command, click.Group):
            yield from all_commands(command, (*path, name))


COMMAND_PATHS = [path for path, _ in all_commands()]


LOG_RECORD = re.compile(r"^\d{4}-\d\d-\d\d \d\d:\d\d:\d\d,\d{3} (WARNING|ERROR) \S+: ")


def one_error_line(result) -> str:
    """The single error line of a failed command: last on stderr, after nothing but log
    records (retries say what they wait for); nothing on stdout."""
    *logs, line = result.stderr.strip().splitlines()
    assert line.startswith("convmon: error: "), result.stderr
    assert all(LOG_RECORD.match(record) for record in logs), result.stderr
    assert "Traceback" not in result.stderr and result.stdout == ""
    return line


# ------------------------------------------------------------------ help and its examples
def test_every_command_is_registered_and_loads():
    assert set(COMMANDS) == {path[0] for path in COMMAND_PATHS}
    assert {"demo", "batches", "estimate", "fit", "run", "status", "watch", "alerts"} <= set(
        COMMANDS
    )
    assert ("alerts", "list") in COMMAND_PATHS and ("alerts", "ack") in COMMAND_PATHS


@pytest.mark.parametrize("path", COMMAND_PATHS, ids=" ".join)
def test_every_command_has_help_with_an_example(path):
    command = dict(all_commands())[path]
    r = convmon(*path, "--help")
    assert r.exit_code == 0, r.stderr
    assert command.help and command.example.startswith(f"convmon {' '.join(path)} ")
    assert r.stdout.rstrip().endswith(f"Example:\n  {command.example}")
    if path != ("demo",):  # the demo needs no configuration
        assert f"--config {SAMPLE_CONFIG}" in command.example


def test_top_level_help_lists_commands_and_the_exit_code_table():
    r = convmon("--help")
    assert r.exit_code == 0
    for name in COMMANDS:
        assert f"\n  {name} " in r.stdout
    table = r.stdout.split("Exit codes:\n")[1]
    for code, meaning in EXIT_CODES.items():
        assert f"  {code}" in table and meaning in table
    assert "not a control or safety system" in " ".join(r.stdout.split())


@pytest.fixture(scope="module")
def example_site(sample_plant, tmp_path_factory):
    """A copy of the sample plant's configuration in its own folder, its store holding one
    poll cycle two hours after the export stopped (so stale-data alerts 1 and 2 exist)."""
    folder = tmp_path_factory.mktemp("examples")
    config = write_plant_config(sample_plant.db_path, folder)
    end = datetime.fromisoformat(sample_plant.truth["export_end"]).timestamp()
    Monitor(load_config(config), clock=lambda: end + 7200.0).run_cycle_safely()
    return config


@pytest.mark.slow
@pytest.mark.parametrize("path", [p for p in COMMAND_PATHS if p != ("demo",)], ids=" ".join)
def test_every_help_example_runs_on_the_sample_plant(path, example_site, monkeypatch):
    """Each example, as printed, on the test copy of the sample plant (the demo's own test
    is tests/test_demo.py). Relative outputs land in the test's folder."""
    monkeypatch.chdir(example_site.parent)
    command = dict(all_commands())[path]
    args = shlex.split(command.example)[1:]
    args = [str(example_site) if a == SAMPLE_CONFIG else a for a in args]
    if path == ("watch",):
        args += ["--count", "1"]
    r = convmon(*args)
    assert r.exit_code == 0, f"{command.example}\n{r.stderr}"
    assert r.stdout.strip()


# ------------------------------------------------------------------ errors and exit codes
@pytest.mark.parametrize(
    "args",
    [
        ("watch", "--interval", "0"),
        ("watch", "--interval", "-5"),
        ("watch", "--count", "0"),
        ("estimate",),
        ("estimate", "--batch", "B", "--bogus"),
        ("fit", "--recipe", "DIM-7", "--out", "x.toml", "--order", "loose"),
        ("fit", "--recipe", "DIM-7", "--out", "x.toml", "--law", "cubic"),
        ("alerts", "ack", "1"),
        ("alerts", "ack", "one", "--by", "x"),
        ("estimat",),
    ],
    ids=" ".join,
)
def test_usage_errors_are_one_line_exit_2(args, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    r = convmon(*args)
    assert r.exit_code == 2
    line = one_error_line(r)
    assert f"(see 'convmon {args[0]}" in line or "No such command" in line


@pytest.mark.parametrize(
    "error",
    [
        ConfigError("bad key", path="site.toml", key="poll.interval_s"),
        HistorianError("historian unreachable"),
        StoreError("store unreadable"),
        IntegrityError("report 3 does not match its checksum"),
    ],
    ids=lambda e: type(e).__name__,
)
def test_monitor_errors_print_one_line_and_exit_with_their_code(error, tmp_path, monkeypatch):
    def fail(cfg):
        raise error

    monkeypatch.setattr(api, "status", fail)
    r = convmon("status", "--config", write_config(tmp_path))
    assert r.exit_code == error.exit_code and r.exit_code in EXIT_CODES
    assert one_error_line(r) == f"convmon: error: {error}"


def test_ctrl_c_exits_130(tmp_path, monkeypatch):
    def interrupted(cfg):
        raise KeyboardInterrupt

    monkeypatch.setattr(api, "status", interrupted)
    r = convmon("status", "--config", write_config(tmp_path))
    assert r.exit_code == INTERRUPTED == 130 and "Traceback" not in r.stderr


def test_missing_configuration_is_exit_2(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    r = convmon("status", env={"CONVMON_CONFIG": ""})
    assert r.exit_code == 2 and "convmon.toml" in one_error_line(r)
    r = convmon("status", env={"CONVMON_CONFIG": str(tmp_path / "site.toml")})
    assert r.exit_code == 2 and "site.toml" in one_error_line(r)


def test_main_returns_the_exit_code(capsys):
    """``monitor.cli.main`` (the console script's entry point) returns, never exits."""
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"convmon {__version__}"
    assert main(["watch", "--interval", "-1"]) == 2
    assert capsys.readouterr().err.startswith("convmon: error: Invalid value for '--interval'")


def test_no_command_shows_help_and_exits_2():
    r = convmon()
    assert r.exit_code == 2 and "Commands:" in r.stderr and r.stdout == ""


def _export(tmp_path, *, events=True):
    import sqlite3

    db = tmp_path / "plant.db"
    con = sqlite3.connect(db)
    con.execute(
        "CREATE TABLE tag_samples (seq INTEGER PRIMARY KEY, tag TEXT, ts TEXT, "
        "value REAL, quality INTEGER)"
    )
    con.execute(
        "CREATE TABLE batch_events (seq INTEGER PRIMARY KEY, batch_id TEXT, unit TEXT, "
        "recipe TEXT, event TEXT, ts TEXT)"
    )
    if events:
        con.execute(
            "INSERT INTO batch_events VALUES (1, 'B1', 'R-1', 'AX', 'start', "
            "'2026-10-01T06:00:00+00:00')"
        )
    con.commit()
    con.close()
    return db


def test_historian_problems_exit_codes(tmp_path):
    """Unreachable export -> 3; no batches -> 3; a configured table the database lacks -> 2."""
    cfg = write_config(tmp_path)
    r = convmon("batches", "--config", cfg)
    assert r.exit_code == 3 and "unreachable" in one_error_line(r)
    _export(tmp_path, events=False)
    r = convmon("batches", "--config", cfg)
    assert r.exit_code == 3 and "no batches" in one_error_line(r)
    bad = write_config(
        tmp_path,
        BASE.replace(
            'url = "sqlite:///plant.db"', 'url = "sqlite:///plant.db"\nevents_table = "evts"'
        ),
    )
    r = convmon("batches", "--config", bad)
    line = one_error_line(r)
    assert r.exit_code == 2 and "evts" in line and "historian.events_table" in line


# ------------------------------------------------------------------ JSON and logs
@pytest.mark.parametrize(
    "args, key",
    [
        (("batches", "--recipe", "CPL-3", "--json"), "batches"),
        (("estimate", "--batch", "TW26-0063", "--json"), "conversion"),
        (("status", "--json"), "status"),
        (("alerts", "--json"), "alerts"),
        (("alerts", "list", "--open", "--json"), "alerts"),
        (("alerts", "--json", "ack", "2", "--by", "night shift"), "acked_by"),
    ],
    ids=lambda v: " ".join(v) if isinstance(v, tuple) else v,
)
def test_json_is_exactly_one_document_on_stdout(args, key, example_site):
    r = convmon(*args, "--config", example_site)
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)  # raises on anything but exactly one document
    assert isinstance(doc, dict) and key in doc


def test_alerts_subcommands_take_the_groups_options(example_site):
    r = convmon("alerts", "--config", example_site, "ack", "1", "--by", "shift-lead")
    assert r.exit_code == 0, r.stderr
    assert "acknowledged by shift-lead" in r.stdout  # acks before this one are counted
    listed = json.loads(convmon("alerts", "--config", example_site, "--json", "list").stdout)
    assert {a["id"]: a["acked_by"] for a in listed["alerts"]}[1] == "shift-lead"


def test_verbose_raises_the_log_level(example_site):
    quiet = convmon("run", "--once", "--config", example_site)
    loud = convmon("-v", "run", "--once", "--config", example_site)
    assert quiet.exit_code == loud.exit_code == 0, quiet.stderr + loud.stderr
    assert quiet.stdout.startswith("cycle done:") and loud.stdout.startswith("cycle done:")
    assert "INFO" not in quiet.stderr
    assert "INFO monitor.service.scheduler: one cycle:" in loud.stderr


# ------------------------------------------------------------------ the real processes
def test_console_script_version():
    exe = Path(sys.executable).with_name("convmon")
    r = subprocess.run([exe, "--version"], capture_output=True, text=True)
    assert r.returncode == 0 and r.stdout.strip() == f"convmon {__version__}"


def test_python_dash_m_and_a_broken_config_exit_2(tmp_path):
    r = subprocess.run([sys.executable, "-m", "monitor", "--help"], capture_output=True, text=True)
    assert r.returncode == 0 and "Exit codes:" in r.stdout
    p = write_config(tmp_path, BASE + "\n[poll]\nbogus = 1\n")
    r = subprocess.run(
        [sys.executable, "-m", "monitor", "batches", "--config", str(p)],
        capture_output=True,
        text=True,
    )
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr.strip().count("\n") == 0 and "poll.bogus" in r.stderr
    assert r.stderr.startswith("convmon: error: ") and "Traceback" not in r.stderr


def test_sigint_exits_130(tmp_path):
    """``watch`` into a pipe, interrupted as Ctrl-C would: exit 130, no traceback."""
    cfg = write_config(
        tmp_path, BASE.replace("[[units]]", '[store]\nurl = "sqlite:///s.db"\n\n[[units]]')
    )
    proc = subprocess.Popen(
        [sys.executable, "-m", "monitor", "watch", "--config", str(cfg), "--interval", "60"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1"},
    )
    try:
        assert "last good cycle" in proc.stdout.readline()  # the first refresh is out
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=30) == INTERRUPTED
        assert "Traceback" not in proc.stderr.read()
    finally:
        if proc.poll() is None:
            proc.kill()
