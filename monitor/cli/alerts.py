"""``convmon alerts``: the alert list, and acknowledging one."""

from __future__ import annotations

import click

from .. import api
from ..config import load_config
from ..outputs.terminal import alerts_text
from .common import config_option, emit, group, json_option

_open_option = click.option(
    "--open", "open_only", is_flag=True, help="only alerts whose condition still holds"
)


@group(
    "alerts",
    invoke_without_command=True,
    example="convmon alerts --config config/sample_plant.toml --open",
)
@config_option
@_open_option
@json_option
@click.pass_context
def alerts(ctx: click.Context, config: str | None, open_only: bool, as_json: bool) -> None:
    """Advisory alerts the live monitor raised: without a subcommand, the list (as
    `alerts list`). Options given here also apply to the subcommand."""
    ctx.obj = {"config": config, "as_json": as_json}
    if ctx.invoked_subcommand is None:
        _list(config, open_only, as_json)


def _list(config: str | None, open_only: bool, as_json: bool) -> None:
    doc = api.list_alerts(load_config(config), open_only=open_only)
    emit(doc, alerts_text(doc), as_json)


@alerts.command("list", example="convmon alerts list --config config/sample_plant.toml --json")
@config_option
@_open_option
@json_option
@click.pass_obj
def list_(parent: dict, config: str | None, open_only: bool, as_json: bool) -> None:
    """The alert list in the order raised: open, acknowledged and cleared."""
    _list(config or parent["config"], open_only, as_json or parent["as_json"])


@alerts.command(
    "ack",
    example="convmon alerts ack 1 --by shift-lead --note 'sampled again' "
    "--config config/sample_plant.toml",
)
@click.argument("alert_id", metavar="ID", type=int)
@click.option("--by", required=True, metavar="NAME", help="who acknowledges the alert")
@click.option("--note", metavar="TEXT", help="what was seen or done (kept with the name)")
@config_option
@json_option
@click.pass_obj
def ack(
    parent: dict, alert_id: int, by: str, note: str | None, config: str | None, as_json: bool
) -> None:
    """Acknowledge alert ID: who, when and a note are added to its history (a second
    acknowledgement adds to it, never replaces). It stays active (and listed under
    --open) until its condition clears."""
    a = api.ack_alert(load_config(config or parent["config"]), alert_id, by, note)
    n = len(a["acks"])
    text = f"alert {a['id']} ({a['kind']}, {a['batch']}) acknowledged by {a['acked_by']}"
    if n > 1:
        text += f" ({n} acknowledgements in all)"
    emit(a, text, as_json or parent["as_json"])
