"""``convmon batches``: the batches found in the export."""

from __future__ import annotations

import click

from .. import api
from ..config import load_config
from ..outputs.terminal import batches_table
from .common import command, config_option, emit, json_option, warn


@command(
    "batches",
    example="convmon batches --config config/sample_plant.toml --recipe DIM-7 --unit R-101",
)
@config_option
@click.option("--unit", metavar="UNIT", help="only batches on this unit")
@click.option("--recipe", metavar="RECIPE", help="only batches of this recipe")
@json_option
def batches(config: str | None, unit: str | None, recipe: str | None, as_json: bool) -> None:
    """Batches found in the export, with their good temperature and assay counts."""
    cfg = load_config(config)
    doc = api.batches_document(cfg, unit, recipe)
    for message in doc["problems"]:
        warn(f"data problem: {message}")
    text = batches_table(doc, cfg.site.timezone) if doc["batches"] else "no batches found"
    emit(doc, text, as_json)
