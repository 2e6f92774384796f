"""``convmon status`` and ``convmon watch``: the running batches from the store."""

from __future__ import annotations

import sys
import time
from collections.abc import Iterator

import click
from rich.live import Live

from .. import api
from ..config import load_config
from ..outputs.terminal import console, status_lines, status_table
from .common import command, config_option, emit, json_option


@command("status", example="convmon status --config config/sample_plant.toml")
@config_option
@json_option
def status(config: str | None, as_json: bool) -> None:
    """Running batches: their newest estimates, open alerts and the monitor's heartbeat
    (what `convmon run` last stored). Advisory only: not a control or safety system."""
    cfg = load_config(config)
    doc = api.status(cfg)
    emit(doc, status_table(doc, cfg.site.timezone, now_s=time.time()), as_json)


def _refreshes(count: int | None, interval_s: float) -> Iterator[int]:
    """0, 1, ... (``count`` of them, or forever), sleeping ``interval_s`` between."""
    n = 0
    while count is None or n < count:
        if n:
            time.sleep(interval_s)
        yield n
        n += 1


@command("watch", example="convmon watch --config config/sample_plant.toml --interval 10")
@config_option
@click.option(
    "--interval",
    type=click.FloatRange(min=0.0, min_open=True),
    default=5.0,
    show_default=True,
    metavar="SECONDS",
    help="refresh period [s]",
)
@click.option(
    "--count",
    type=click.IntRange(min=1),
    default=None,
    metavar="N",
    help="stop after N refreshes [default: until Ctrl-C]",
)
def watch(config: str | None, interval: float, count: int | None) -> None:
    """The status view, refreshed every --interval seconds until Ctrl-C.

    On a terminal it redraws the table in place; into a pipe it prints plain lines.
    """
    cfg = load_config(config)
    zone = cfg.site.timezone
    if not sys.stdout.isatty():
        for _ in _refreshes(count, interval):
            click.echo("\n".join(status_lines(api.status(cfg), zone, time.time())))
            sys.stdout.flush()
        return
    with Live(console=console(), refresh_per_second=2) as live:
        for _ in _refreshes(count, interval):
            live.update(status_table(api.status(cfg), zone, now_s=time.time()))
