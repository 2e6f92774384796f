"""The top-level ``convmon`` group: global options, logging, exit codes, the commands."""

from __future__ import annotations

import importlib
import logging
import sys

import click

from .. import __version__
from ..errors import EXIT_CODES, INTERRUPTED, MonitorError
from ..outputs.terminal import CAUTION

#: Every command: its name and ``module:attribute`` in this package. A module is imported
#: only when its command runs (or a help lists it), so ``convmon status`` does not load
#: the fitting and plotting stack. A new command is one module and one line here.
COMMANDS: dict[str, str] = {
    "demo": "demo:demo",
    "batches": "batches:batches",
    "estimate": "estimate:estimate",
    "fit": "fit:fit",
    "run": "run:run",
    "status": "status:status",
    "watch": "status:watch",
    "alerts": "alerts:alerts",
    "golden": "golden:golden",
}

_LOG_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"


class RootGroup(click.Group):
    """``convmon``: commands loaded by name; every failure becomes one line and an exit code."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return list(COMMANDS)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        target = COMMANDS.get(cmd_name)
        if target is None:
            return None
        module, attribute = target.split(":")
        return getattr(importlib.import_module(f".{module}", __package__), attribute)

    def format_epilog(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        with formatter.section("Exit codes"):
            formatter.write_dl([(str(code), what) for code, what in EXIT_CODES.items()])
        formatter.write_paragraph()
        formatter.write_text(
            "Each command's --help ends with an example on the invented sample plant "
            f"(config/sample_plant.toml). {CAUTION.capitalize()}."
        )

    def main(self, args=None, prog_name=None, standalone_mode=True, **extra):
        """Run a command; return its exit code (``standalone_mode``: exit with it)."""
        try:
            result = super().main(args, prog_name or self.name, standalone_mode=False, **extra)
            code = result if isinstance(result, int) else 0
        except click.exceptions.NoArgsIsHelpError as exc:
            exc.show()
            code = exc.exit_code
        except click.UsageError as exc:
            where = exc.ctx.command_path if exc.ctx is not None else self.name
            _error(f"{exc.format_message()} (see '{where} --help')")
            code = exc.exit_code
        except click.ClickException as exc:
            _error(exc.format_message())
            code = exc.exit_code
        except MonitorError as exc:
            _error(str(exc))
            code = exc.exit_code
        except (click.Abort, KeyboardInterrupt):
            code = INTERRUPTED
        if standalone_mode:
            sys.exit(code)
        return code


def _error(message: str) -> None:
    """The one line a failure prints on stderr."""
    click.echo(f"convmon: error: {' '.join(message.split())}", err=True)


def _log_to_stderr(ctx: click.Context, verbose: int) -> None:
    """Log records to stderr for this invocation: warnings; -v convmon's info; -vv all debug."""
    root, own = logging.getLogger(), logging.getLogger("monitor")
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter(_LOG_FORMAT))
    before = root.level, own.level
    root.addHandler(handler)
    root.setLevel(logging.DEBUG if verbose >= 2 else logging.WARNING)
    own.setLevel(logging.INFO if verbose == 1 else logging.NOTSET)

    def restore() -> None:
        root.removeHandler(handler)
        root.setLevel(before[0])
        own.setLevel(before[1])

    ctx.call_on_close(restore)


@click.group(
    "convmon",
    cls=RootGroup,
    context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100},
)
@click.version_option(__version__, "--version", prog_name="convmon", message="%(prog)s %(version)s")
@click.option("-v", "--verbose", count=True, help="more log output on stderr (-v, -vv)")
@click.pass_context
def cli(ctx: click.Context, verbose: int) -> None:
    """Conversion monitor for batch reactors: live conversion, predicted end time and
    drift, read from the plant historian's export."""
    _log_to_stderr(ctx, verbose)


def main(argv: list[str] | None = None) -> int:
    """``convmon``: run the command in ``argv`` (default: the process's arguments);
    returns the exit code."""
    return cli.main(argv, "convmon", standalone_mode=False)
