"""One function per command: call the API, print the result (JSON or text)."""

from __future__ import annotations

import sys

from . import api
from .config import load_config
from .outputs import formats


def _out(args, doc, text: str) -> None:
    print(formats.dumps(doc) if getattr(args, "json", False) else text)


def cmd_batches(args) -> int:
    cfg = load_config(args.config)
    batches, counts, problems = api.list_batches(cfg, args.unit, args.recipe)
    for p in problems:
        print(f"convmon: data problem: {p.message}", file=sys.stderr)
    docs = [formats.batch_json(b, counts.get(b.batch, (0, 0))) for b in batches]
    if args.json:
        print(formats.dumps({"batches": docs, "problems": [p.message for p in problems]}))
        return 0
    if not docs:
        print("no batches found")
        return 0
    from rich.console import Console
    from rich.table import Table

    table = Table(title=f"{len(docs)} batches")
    for col in ("batch", "unit", "recipe", "start", "end", "state", "n_temperature", "n_assays"):
        table.add_column(col)
    for d in docs:
        table.add_row(*[("" if d[c] is None else str(d[c])) for c in
                        ("batch", "unit", "recipe", "start", "end", "state", "n_temperature",
                         "n_assays")])
    Console().print(table)
    return 0


def cmd_estimate(args) -> int:
    cfg = load_config(args.config)
    at = api.parse_time(args.at, cfg.site.timezone) if args.at else None
    est, _ = api.estimate_batch(cfg, args.batch, at)
    _out(args, formats.estimate_json(est), formats.estimate_text(est, cfg.site.timezone))
    return 0
