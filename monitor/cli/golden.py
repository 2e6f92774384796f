"""``convmon golden build`` and ``convmon golden show``: a recipe's golden profile."""

from __future__ import annotations

import contextlib
import sys

import click
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

from .. import api
from ..config import load_config
from .common import config_option, emit, group, json_option

_recipe_option = click.option(
    "--recipe", required=True, metavar="RECIPE", help="the recipe whose golden profile"
)


class _Loading:
    """A progress bar on stderr while the batches' hindsight is read from the historian."""

    def __init__(self):
        self.bar = Progress(
            TextColumn("{task.description}"),
            BarColumn(),
            MofNCompleteColumn(),
            console=Console(stderr=True),
            transient=True,
        )
        self.task = None

    def __enter__(self):
        self.bar.start()
        return self

    def __exit__(self, *exc):
        self.bar.stop()

    def __call__(self, done: int, total: int, name: str) -> None:
        if self.task is None:
            self.task = self.bar.add_task("reading batches", total=total)
        self.bar.update(self.task, completed=done, description=f"reading {name}")


def _progress():
    return _Loading() if sys.stderr.isatty() else None


@group("golden", example="convmon golden build --config config/sample_plant.toml --recipe CPL-3")
def golden() -> None:
    """A recipe's golden profile: bands of good batches and the alert limits calibrated on
    them. Advisory only: not a safety or control system."""


@golden.command(
    "build", example="convmon golden build --config config/sample_plant.toml --recipe CPL-3"
)
@config_option
@_recipe_option
@click.option(
    "--batches",
    metavar="B1,B2,...",
    help="these good batches [default: the recipe's complete batches that are at target, "
    "within the usual time to target and free of data problems]",
)
@json_option
def build(config: str | None, recipe: str, batches: str | None, as_json: bool) -> None:
    """Build the recipe's golden profile from the historian and store it as a new version.

    Limits are calibrated leave-one-batch-out so that at most [golden] false_alarm_rate of
    the golden batches would have raised an alert."""
    cfg = load_config(config)
    wanted = [b.strip() for b in batches.split(",") if b.strip()] if batches else None
    progress = _progress()
    with progress or contextlib.nullcontext():
        out = api.golden_build(cfg, recipe, batches=wanted, progress=progress)
    emit(out.document(), "\n".join(out.lines(cfg.site.timezone)), as_json)


@golden.command(
    "show",
    example="convmon golden show --config config/sample_plant.toml --recipe CPL-3 "
    "--chart var/golden-cpl3.png",
)
@config_option
@_recipe_option
@click.option(
    "--chart",
    metavar="FILE",
    type=click.Path(dir_okay=False),
    help="draw the profile (PNG, SVG or PDF by the suffix)",
)
@json_option
def show(config: str | None, recipe: str, chart: str | None, as_json: bool) -> None:
    """The recipe's latest golden profile: limits, calibration, the batches it came from.
    With no stored profile, one is built from history and shown, not stored."""
    cfg = load_config(config)
    progress = _progress()
    with progress or contextlib.nullcontext():
        out = api.golden_show(cfg, recipe, chart=chart, progress=progress)
    text = "\n".join(out.lines(cfg.site.timezone))
    if out.chart:
        text += f"\nchart: {out.chart}"
    emit(out.document(), text, as_json)
