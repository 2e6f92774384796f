"""``convmon fit``: kinetics from the recipe's history, or from isothermal lab runs."""

from __future__ import annotations

import contextlib
import sys

import click
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

from .. import api
from ..config import load_config
from ..fitting.job import fit_lab_csv, fit_recipe
from ..outputs.fit_report import fit_text
from ..physics.rate_laws import LAWS
from .common import command, config_option, emit, json_option


class OrderType(click.ParamType):
    """``--order``: a reaction order (a number) or ``free`` to fit it."""

    name = "N|free"

    def convert(self, value, param, ctx):
        if isinstance(value, float):
            return value
        if str(value).strip().lower() == "free":
            return "free"
        try:
            return float(value)
        except ValueError:
            self.fail(f"expected a number or 'free', got {value!r}", param, ctx)


class FitProgress:
    """Progress bars on stderr: batches loaded, then optimiser iterations per stage."""

    def __init__(self):
        self.bar = Progress(
            TextColumn("{task.description}"),
            BarColumn(),
            MofNCompleteColumn(),
            console=Console(stderr=True),
            transient=True,
        )
        self._load = self._iter = None

    def __enter__(self):
        self.bar.start()
        return self

    def __exit__(self, *exc):
        self.bar.stop()

    def loading(self, done: int, total: int, name: str) -> None:
        if self._load is None:
            self._load = self.bar.add_task("loading batches", total=total)
        self.bar.update(self._load, completed=done, description=f"loading {name}")

    def stage(self, text: str) -> None:
        if self._iter is None:
            self._iter = self.bar.add_task(text, total=None)
        self.bar.update(self._iter, description=text)

    def iteration(self, n: int) -> None:
        if self._iter is None:
            self.stage("optimiser iterations")
        self.bar.update(self._iter, completed=n)


@command(
    "fit",
    example="convmon fit --config config/sample_plant.toml --recipe CPL-3 "
    "--out var/kinetics/cpl3-v2.toml",
)
@config_option
@click.option("--recipe", required=True, metavar="RECIPE", help="the recipe whose kinetics to fit")
@click.option(
    "--batches",
    metavar="B1,B2,...",
    help="only these batches [default: every complete batch of the recipe]",
)
@click.option(
    "--law",
    type=click.Choice(LAWS),
    metavar="LAW",
    help=f"rate law: {', '.join(LAWS)} [default: the recipe's current law; candidate laws "
    "are compared]",
)
@click.option("--order", type=OrderType(), help="a fixed reaction order, or 'free' to fit it")
@click.option(
    "--lab-csv",
    metavar="FILE",
    type=click.Path(exists=True, dir_okay=False),
    help="isothermal lab runs instead of the historian (columns time_s, T_K, c_a)",
)
@click.option(
    "--out", required=True, metavar="FILE", type=click.Path(dir_okay=False), help="kinetics file"
)
@click.option("--force", is_flag=True, help="replace an existing --out file")
@json_option
def fit(
    config: str | None,
    recipe: str,
    batches: str | None,
    law: str | None,
    order: float | str | None,
    lab_csv: str | None,
    out: str,
    force: bool,
    as_json: bool,
) -> None:
    """Fit kinetics from the recipe's history (or a lab CSV) and write a new kinetics file
    with its parity, residual and Arrhenius plots; never overwrites one without --force."""
    progress = FitProgress() if sys.stderr.isatty() else None
    options = {"law": law, "order": order, "force": force, "progress": progress}
    with progress or contextlib.nullcontext():
        if lab_csv:
            prior, prior_path = api.lab_prior(api.optional_config(config), recipe)
            doc = fit_lab_csv(
                lab_csv, out, prior=prior, prior_path=prior_path, recipe=recipe, **options
            )
        else:
            wanted = [b.strip() for b in batches.split(",") if b.strip()] if batches else None
            doc = fit_recipe(load_config(config), recipe, out, batches=wanted, **options)
    emit(doc, fit_text(doc), as_json)
