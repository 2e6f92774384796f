"""One function per command: call the API, print the result (JSON or text)."""

from __future__ import annotations

import sys
from datetime import datetime

from . import api
from .config import load_config
from .outputs import documents as formats
from .outputs import fit_report, terminal
from .timefmt import local


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
    from rich.table import Table

    from .outputs.terminal import console

    table = Table(title=f"{len(docs)} batches")
    zone = cfg.site.timezone
    for col in ("batch", "unit", "recipe", "start", "end", "state", "temperatures", "assays"):
        table.add_column(col, justify="right" if col in ("temperatures", "assays") else "left")
    for b, d in zip(batches, docs, strict=True):
        table.add_row(
            d["batch"],
            d["unit"],
            d["recipe"],
            local(b.start_s, zone),
            local(b.end_s, zone),
            d["state"],
            str(d["n_temperature"]),
            str(d["n_assays"]),
        )
    table.caption = f"times in {zone}; sample counts are good samples in the batch window"
    console().print(table)
    return 0


def cmd_estimate(args) -> int:
    cfg = load_config(args.config)
    at = api.parse_time(args.at, cfg.site.timezone) if args.at else None
    est, _ = api.estimate_batch(cfg, args.batch, at)
    _out(args, formats.estimate_json(est), terminal.estimate_text(est, cfg.site.timezone))
    return 0


def cmd_run(args) -> int:
    from .service.scheduler import run_once, run_service

    cfg = load_config(args.config)
    if args.once:
        rep = run_once(cfg)
        print(
            f"cycle done: {rep.rows_read} rows read, {rep.running} running batches, "
            f"{rep.estimates_added} estimates and {rep.alerts_added} alerts added"
        )
    else:
        run_service(cfg)
    return 0


def cmd_status(args) -> int:
    from .outputs.terminal import status_table

    cfg = load_config(args.config)
    doc = api.status(cfg)
    if args.json:
        print(formats.dumps(doc))
        return 0
    import time as _time

    from .outputs.terminal import console

    console().print(status_table(doc, cfg.site.timezone, now_s=_time.time()))
    return 0


def _plain_lines(doc: dict, zone: str, now_s: float) -> list[str]:
    beat = doc.get("heartbeat") or {}
    lines = [f"{local(now_s, zone)} last good cycle {beat.get('last_good_cycle')}"]
    for r in doc["status"]:
        age = (now_s - datetime.fromisoformat(r["at"]).timestamp()) / 60
        lines.append(
            f"{r['unit']} {r['batch']} {r['recipe']} X={r['conversion']:.3f}"
            f"±{r['conversion_sd']:.3f} P50={r['predicted_end']} "
            f"P10={r['predicted_end_p10']} P90={r['predicted_end_p90']} "
            f"alerts={','.join(r['alerts']) or '-'} data_age_min={age:.0f}"
        )
    return lines


def cmd_watch(args) -> int:
    """Refresh the status view; plain lines when stdout is not a terminal."""
    import time as _time

    from .outputs.terminal import status_table

    cfg = load_config(args.config)
    zone = cfg.site.timezone
    n = 0
    if not sys.stdout.isatty():
        while args.count is None or n < args.count:
            if n:
                _time.sleep(args.interval)
            print("\n".join(_plain_lines(api.status(cfg), zone, _time.time())), flush=True)
            n += 1
        return 0
    from rich.live import Live

    with Live(
        status_table(api.status(cfg), zone, now_s=_time.time()), refresh_per_second=2
    ) as live:
        while args.count is None or n < args.count:
            _time.sleep(args.interval)
            live.update(status_table(api.status(cfg), zone, now_s=_time.time()))
            n += 1
    return 0


def cmd_demo(args) -> int:
    from .demo import run_demo

    summary = run_demo(args.out, fast=args.fast)
    print(
        f"demo done in {summary['wall_s']:.0f} s: {summary['batches']} batches monitored, "
        f"{summary['estimates']} estimates, {summary['alerts']} alerts stored"
    )
    return 0


class _FitProgress:
    """Progress bars on stderr (only on a terminal): batches loaded, optimiser iterations."""

    def __init__(self):
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

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


def cmd_fit(args) -> int:
    import contextlib
    from pathlib import Path

    from .config import load_kinetics
    from .errors import ConfigError
    from .fitting import job as fitjob

    progress = _FitProgress() if sys.stderr.isatty() else None
    with progress or contextlib.nullcontext():
        if args.lab_csv:
            prior, prior_path = None, None
            try:
                cfg = load_config(args.config)
            except ConfigError:
                if args.config:  # an explicit config must load; the default one may be absent
                    raise
                cfg = None
            rc = cfg.recipe(args.recipe) if cfg else None
            if rc is not None and Path(rc.kinetics).exists():
                prior, prior_path = load_kinetics(rc.kinetics), rc.kinetics
            doc = fitjob.fit_lab_csv(
                args.lab_csv,
                args.out,
                prior=prior,
                prior_path=prior_path,
                law=args.law,
                order=args.order,
                force=args.force,
                recipe=args.recipe,
                progress=progress,
            )
        else:
            cfg = load_config(args.config)
            wanted = (
                [b.strip() for b in args.batches.split(",") if b.strip()] if args.batches else None
            )
            doc = fitjob.fit_recipe(
                cfg,
                args.recipe,
                args.out,
                batches=wanted,
                law=args.law,
                order=args.order,
                force=args.force,
                progress=progress,
            )
    _out(args, doc, fit_report.fit_text(doc))
    return 0


def cmd_alerts(args) -> int:
    from .errors import UsageError

    cfg = load_config(args.config)
    if args.action == "ack":
        if args.alert_id is None or not args.by:
            raise UsageError("usage: convmon alerts ack ID --by NAME")
        a = api.ack_alert(cfg, args.alert_id, args.by)
        _out(
            args, a, f"alert {a['id']} ({a['kind']}, {a['batch']}) acknowledged by {a['acked_by']}"
        )
        return 0
    doc = api.list_alerts(cfg, open_only=args.open)
    lines = [
        f"{d['id']:>5} {d['state']:<8} {d['severity']:<8} {d['batch']:<12} {d['kind']:<20} "
        f"{d['raised_at']}  {d['message']}"
        for d in doc["alerts"]
    ] or ["no alerts"]
    _out(args, doc, "\n".join(lines))
    return 0
