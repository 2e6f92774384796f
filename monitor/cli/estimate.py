"""``convmon estimate``: one batch's conversion now and its predicted end."""

from __future__ import annotations

import click

from .. import api
from ..config import load_config
from ..outputs.documents import estimate_json
from ..outputs.terminal import estimate_text
from .common import command, config_option, emit, json_option


@command(
    "estimate",
    example="convmon estimate --config config/sample_plant.toml --batch TW26-0064 "
    "--at 2026-11-02T12:30",
)
@config_option
@click.option("--batch", required=True, metavar="BATCH", help="batch id, as in the export")
@click.option(
    "--at",
    metavar="TIME",
    help="look back: use only data stamped up to TIME, ISO 8601 with an offset "
    "(2026-11-02T12:30+01:00, or Z for UTC) or without one in the site's zone ([site] "
    "timezone); not after the batch's last data",
)
@json_option
def estimate(config: str | None, batch: str, at: str | None, as_json: bool) -> None:
    """Conversion now and predicted end time of one batch, read from the historian.

    A running batch is estimated at its last temperature sample, a complete one at
    its end; --at looks back to an earlier moment (a time after the batch's last data
    is refused: an estimate does not look ahead). Advisory only: not a control or
    safety system.
    """
    cfg = load_config(config)
    at_s = api.parse_time(at, cfg.site.timezone) if at else None
    est, _ = api.estimate_batch(cfg, batch, at_s)
    emit(estimate_json(est), estimate_text(est, cfg.site.timezone), as_json)
