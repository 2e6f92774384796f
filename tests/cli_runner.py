"""The command line in this process, through click's CliRunner (stdout and stderr apart)."""

from __future__ import annotations

from click.testing import CliRunner, Result

from monitor.cli import cli


def convmon(*args: str, env: dict[str, str] | None = None) -> Result:
    """``convmon ARGS`` in this process: ``.exit_code``, ``.stdout``, ``.stderr``."""
    return CliRunner().invoke(cli, [str(a) for a in args], env=env)
