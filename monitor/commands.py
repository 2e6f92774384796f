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


def cmd_run(args) -> int:
    from .service import run_service

    cfg = load_config(args.config)
    return run_service(cfg, once=args.once)


def status_doc(cfg) -> dict:
    from .store.db import Store

    store = Store(cfg.store.url)
    try:
        rows = store.latest_estimates()
        open_alerts = store.open_alerts()
        beat = store.heartbeat()
    finally:
        store.close()
    kinds: dict = {}
    for a in open_alerts:
        kinds.setdefault(a["batch"], []).append(a["kind"])
    for r in rows:
        r["alerts"] = kinds.get(r["batch"], [])
    return {"status": rows,
            "heartbeat": {"last_good_cycle": formats.iso(beat["last_good_cycle_s"]) if beat
                          else None,
                          "last_data": formats.iso(beat["last_data_s"]) if beat else None,
                          "cycles": beat["cycles"] if beat else 0,
                          "failed_cycles": beat["failed_cycles"] if beat else 0}}


def cmd_status(args) -> int:
    from .outputs.board import status_table

    cfg = load_config(args.config)
    doc = status_doc(cfg)
    if args.json:
        print(formats.dumps(doc))
        return 0
    from rich.console import Console

    Console().print(status_table(doc, cfg.site.timezone))
    return 0


def cmd_watch(args) -> int:
    import time as _time

    from .outputs.board import status_table

    cfg = load_config(args.config)
    if not sys.stdout.isatty():
        doc = status_doc(cfg)
        for r in doc["status"]:
            print(f"{r['unit']} {r['batch']} {r['recipe']} X={r['conversion']:.3f}"
                  f"±{r['conversion_sd']:.3f} P50={r['predicted_end']} alerts={r['alerts']}")
        return 0
    from rich.live import Live

    with Live(status_table(status_doc(cfg), cfg.site.timezone), refresh_per_second=2) as live:
        while True:
            _time.sleep(args.interval)
            live.update(status_table(status_doc(cfg), cfg.site.timezone))


def cmd_demo(args) -> int:
    from .demo import run_demo

    summary = run_demo(args.out, fast=args.fast)
    print(f"demo done in {summary['wall_s']:.0f} s: {summary['batches']} batches monitored, "
          f"{summary['estimates']} estimates, {summary['alerts']} alerts stored")
    return 0
