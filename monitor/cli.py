"""Command line: parse, call the library API, print. Nothing else.

Exit codes: 0 success, 2 bad usage or configuration, 3 historian or store
unreachable or unreadable, 4 an integrity check failed.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys

# Small dense matrices (fit Jacobians): a multi-threaded BLAS only contends for the two
# cores with the rest of the process; a site can still override this from the environment.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from . import __version__
from .errors import MonitorError, UsageError

EPILOG = """examples:
  convmon demo
  convmon batches --config config/sample_plant.toml --json
  convmon estimate --batch R101-0042 --at 2026-10-05T14:30 --config config/sample_plant.toml
  convmon fit --recipe ES-12 --order free --out kinetics/es12-v2.toml

exit codes: 0 ok, 2 bad usage or configuration, 3 historian or store unreachable,
4 integrity check failed. Advisory tool only: not a control or safety system."""

COMMANDS: dict[str, tuple[str, str]] = {}


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # usage errors: one line, exit 2
        raise UsageError(f"{self.prog}: {message}")


def _common(p: argparse.ArgumentParser, json_flag=True) -> None:
    p.add_argument(
        "--config",
        metavar="PATH",
        help="configuration file (default: $CONVMON_CONFIG, else ./convmon.toml)",
    )
    if json_flag:
        p.add_argument("--json", action="store_true", help="print one JSON document on stdout")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="convmon",
        description="Conversion monitor for batch reactors: live "
        "conversion, predicted end time and drift from the plant historian.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"convmon {__version__}")
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more log output")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    def add(name, help_text, example):
        p = sub.add_parser(
            name,
            help=help_text,
            description=help_text,
            epilog=f"example:\n  {example}",
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        COMMANDS[name] = (help_text, example)
        return p

    p = add(
        "demo",
        "the main job end to end on the embedded sample plant (no config needed)",
        "convmon demo --out var/demo",
    )
    p.add_argument("--out", metavar="DIR", default="var/demo", help="where the demo writes")
    p.add_argument("--fast", action="store_true", help="shorter replay (for tests)")

    p = add("batches", "batches found in the export", "convmon batches --unit R-101 --json")
    _common(p)
    p.add_argument("--unit")
    p.add_argument("--recipe")

    p = add(
        "estimate",
        "conversion now and predicted end time of one batch",
        "convmon estimate --batch R101-0042 --at 2026-10-05T14:30 --json",
    )
    _common(p)
    p.add_argument("--batch", required=True)
    p.add_argument(
        "--at",
        metavar="TIME",
        help="look back: use only data up to TIME (ISO 8601; no offset = site time)",
    )

    p = add(
        "fit",
        "fit kinetics from the recipe's history (or a lab CSV)",
        "convmon fit --recipe ES-12 --order free --out kinetics/es12-v2.toml",
    )
    _common(p)
    p.add_argument("--recipe", required=True)
    p.add_argument(
        "--batches",
        metavar="B1,B2,...",
        help="only these batches (default: all complete batches of the recipe)",
    )
    p.add_argument(
        "--law",
        choices=("power", "bimolecular", "autocatalytic", "reversible"),
        help="rate law (default: the recipe's current law; candidates compared)",
    )
    p.add_argument("--order", metavar="N|free", help="fixed order, or 'free' to fit it")
    p.add_argument(
        "--lab-csv",
        metavar="FILE",
        help="isothermal lab data instead of the historian (time_s, T_K, c_a)",
    )
    p.add_argument("--out", required=True, metavar="FILE", help="kinetics file to write")
    p.add_argument("--force", action="store_true", help="replace an existing --out file")

    p = add("run", "the live monitor (poll loop)", "convmon run --config plant.toml --once")
    _common(p, json_flag=False)
    p.add_argument("--once", action="store_true", help="run one cycle and exit")

    p = add("status", "running batches, their estimates and open alerts", "convmon status --json")
    _common(p)

    p = add(
        "alerts",
        "alert list; 'alerts ack ID --by NAME' acknowledges one",
        "convmon alerts --open --json",
    )
    _common(p)
    p.add_argument("action", nargs="?", choices=["ack"], help="ack: acknowledge alert ID")
    p.add_argument("alert_id", nargs="?", type=int, metavar="ID")
    p.add_argument("--open", action="store_true", help="only alerts whose condition holds")
    p.add_argument("--by", metavar="NAME", help="who acknowledges (with ack)")

    p = add("watch", "live-refreshing terminal view of status", "convmon watch")
    _common(p, json_flag=False)
    p.add_argument("--interval", type=float, default=5.0, help="refresh period [s]")
    p.add_argument("--count", type=int, help="stop after N refreshes (default: until Ctrl-C)")
    return parser


def main(argv: list[str] | None = None) -> int:
    logging.basicConfig(
        level=logging.WARNING,
        stream=sys.stderr,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if args.verbose:
            logging.getLogger().setLevel(logging.INFO if args.verbose == 1 else logging.DEBUG)
        if not args.command:
            parser.print_help()
            return 2
        from . import commands

        return getattr(commands, f"cmd_{args.command}")(args) or 0
    except MonitorError as exc:
        print(f"convmon: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        return 130
