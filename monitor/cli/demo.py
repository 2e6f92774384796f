"""``convmon demo``: the whole job on the invented sample plant."""

from __future__ import annotations

import click

from ..demo import run_demo
from .common import command


@command("demo", example="convmon demo --out var/demo")
@click.option(
    "--out",
    metavar="DIR",
    type=click.Path(file_okay=False),
    default="var/demo",
    show_default=True,
    help="where the demo writes its store, live historian and fitted kinetics",
)
@click.option("--fast", is_flag=True, help="a shorter replay, without pauses (for tests)")
def demo(out: str, fast: bool) -> None:
    """The main job end to end on the embedded sample plant (no configuration needed).

    Generates the invented plant's export if missing, fits each recipe's kinetics from
    its history, then replays the last plant-hours through the live monitor.
    """
    summary = run_demo(out, fast=fast)
    click.echo(
        f"demo done in {summary['wall_s']:.0f} s: {summary['batches']} batches monitored, "
        f"{summary['estimates']} estimates, {summary['alerts']} alerts stored"
    )
