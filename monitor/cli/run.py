"""``convmon run``: the live monitor."""

from __future__ import annotations

import click

from ..config import load_config
from ..service.scheduler import run_once, run_service
from .common import command, config_option


@command("run", example="convmon run --config config/sample_plant.toml --once")
@config_option
@click.option("--once", is_flag=True, help="run one poll cycle and exit")
def run(config: str | None, once: bool) -> None:
    """The live monitor: poll the historian every poll.interval_s, estimate each running
    batch, raise and clear alerts, keep the results in the store. Stop with Ctrl-C or
    SIGTERM (the current cycle finishes)."""
    cfg = load_config(config)
    if not once:
        run_service(cfg)
        return
    rep = run_once(cfg)
    click.echo(
        f"cycle done: {rep.rows_read} rows read, {rep.running} running batches, "
        f"{rep.estimates_added} estimates and {rep.alerts_added} alerts added"
    )
