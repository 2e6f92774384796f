"""What every command shares: its example in the help, ``--config``, ``--json``, output."""

from __future__ import annotations

from collections.abc import Callable

import click
from rich.console import RenderableType

from ..config import DEFAULT_CONFIG, ENV_VAR
from ..outputs.documents import dumps
from ..outputs.terminal import console


class _WithExample:
    """Help that ends with one invocation that works on the sample plant."""

    example: str

    def format_epilog(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        with formatter.section("Example"):
            formatter.write(f"{'':>{formatter.current_indent}}{self.example}\n")
        super().format_epilog(ctx, formatter)


class Command(_WithExample, click.Command):
    """A command with an example (``example=`` is required)."""

    def __init__(self, *args, example: str, **kwargs):
        super().__init__(*args, **kwargs)
        self.example = example


class Group(_WithExample, click.Group):
    """A group of subcommands with an example of its own."""

    command_class = Command

    def __init__(self, *args, example: str, **kwargs):
        super().__init__(*args, **kwargs)
        self.example = example


def command(name: str, *, example: str, **kwargs) -> Callable:
    """``@command("status", example="convmon status --config ...")``."""
    return click.command(name, cls=Command, example=example, **kwargs)


def group(name: str, *, example: str, **kwargs) -> Callable:
    """``@group("alerts", example=...)``: subcommands use ``@<group>.command(..., example=)``."""
    return click.group(name, cls=Group, example=example, **kwargs)


def config_option(f: Callable) -> Callable:
    """``--config PATH`` (passed as ``config``; None means the default)."""
    return click.option(
        "--config",
        "config",
        metavar="PATH",
        type=click.Path(dir_okay=False),
        default=None,
        help=f"configuration file [default: ${ENV_VAR}, else ./{DEFAULT_CONFIG}]",
    )(f)


def json_option(f: Callable) -> Callable:
    """``--json`` (passed as ``as_json``)."""
    return click.option(
        "--json", "as_json", is_flag=True, help="print exactly one JSON document on stdout"
    )(f)


def emit(doc, text: str | RenderableType, as_json: bool) -> None:
    """Print the result: one JSON document, or the text (a string or a rich table)."""
    if as_json:
        click.echo(dumps(doc))
    elif isinstance(text, str):
        click.echo(text)
    else:
        console().print(text)


def warn(message: str) -> None:
    """One line on stderr (stdout stays the result)."""
    click.echo(f"convmon: {message}", err=True)
