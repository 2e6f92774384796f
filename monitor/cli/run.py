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
    SIGTERM (the current cycle finishes).

    One monitor per store: a second run on the same store, from any configuration, is
    refused (exit 3). A changed kinetics or configuration file is read at the next
    cycle and the running batches it concerns are re-estimated ([historian], [store],
    [poll] and [writeback] apply at the next start)."""
    cfg = load_config(config)
    if not once:
        run_service(cfg)
        return
    rep = run_once(cfg)
    click.echo(
        f"cycle done: {rep.rows_read} rows read, {rep.running} running batches, "
        f"{rep.estimates_added} estimates and {rep.alerts_added} alerts added"
    )
