"""``convmon demo``: the whole job on the invented sample plant, in about a minute.

1. Generate the sample plant export if it is missing.
2. Fit each recipe's kinetics from the batches completed before the replay.
3. Build each recipe's golden profile from the good batches completed before the
   replay (with the fitted kinetics), limits calibrated leave-one-batch-out.
4. Replay the last part of the export into a live historian file, in ``seq``
   (arrival) order at an accelerated clock, while the real poll cycle runs on
   it: the live table shows predicted end times converging as assays arrive and
   how far each batch is from its golden band.
5. Summarise how each batch's forecast converged, the alerts raised, and what was
   written where. (The generator's truth file is for tests only; the demo does not
   read it.)

Advisory only: convmon is not a control or safety system.
"""

from __future__ import annotations

import shutil
import time
from datetime import datetime
from pathlib import Path

from rich.live import Live

from sample_historian.generate import generate
from sample_historian.replay import Replay, export_end

from . import api
from .config import config_from_dict
from .fitting.job import fit_recipe
from .fleet.golden import GoldenCriteria
from .fleet.golden_job import build_golden
from .historian.reader import HistorianReader
from .outputs.terminal import console as board_console
from .outputs.terminal import status_table
from .service.cycle import Monitor
from .store import Store
from .timefmt import duration, to_datetime

REPO = Path(__file__).resolve().parent.parent
SAMPLE_DB = REPO / "sample_historian" / "plant.db"
SAMPLE_CONFIG = REPO / "config" / "sample_plant.toml"


def _config(out: Path, live_db: Path, kinetics: dict[str, Path]):
    import tomllib

    data = tomllib.loads(SAMPLE_CONFIG.read_text(encoding="utf-8"))
    data["historian"]["url"] = f"sqlite:///{live_db}"
    data["store"] = {"url": f"sqlite:///{out / 'convmon.db'}"}
    for name, rec in data.get("recipes", {}).items():
        rec["kinetics"] = str(kinetics.get(name, (SAMPLE_CONFIG.parent / rec["kinetics"])))
    return config_from_dict(data, SAMPLE_CONFIG.resolve())


def _fit_kinetics(out: Path, cfg_hist, before_s: float, log) -> dict[str, Path]:
    """Fit each recipe on batches completed before the replay; {} if the fit is unavailable."""
    reader = HistorianReader(cfg_hist)
    found = {}
    try:
        batches, _ = reader.batches()
    finally:
        reader.close()
    for recipe in cfg_hist.recipes:
        ids = [
            b.batch
            for b in batches
            if b.recipe == recipe and b.end_s is not None and b.end_s < before_s
        ]
        path = out / "kinetics" / f"{recipe.lower()}.toml"
        t0 = time.perf_counter()
        try:
            res = fit_recipe(cfg_hist, recipe, path, batches=ids, force=True)
        except Exception as exc:  # the demo goes on with the shipped kinetics
            log(f"  fit of {recipe} failed ({exc}); using config/kinetics")
            continue
        found[recipe] = path
        se = res.get("stderr", {})
        log(
            f"  {recipe}: {res['rate_law']} order {res['order']:.2f}, "
            f"Ea {_kj(res['ea_j_per_mol'], se.get('ea_j_per_mol'))}, "
            f"k_ref {res['k_ref']:.3g} at {res['t_ref_k']:.1f} K, from {len(ids)} "
            f"batches in {time.perf_counter() - t0:.1f} s -> {path}"
        )
    return found


def _golden_profiles(cfg_hist, before_s: float, log) -> None:
    """Each recipe's golden profile from its good batches completed before the replay."""
    store = Store(cfg_hist.store.url)
    try:
        for recipe in cfg_hist.recipes:
            t0 = time.perf_counter()
            p = build_golden(
                cfg_hist,
                recipe,
                store,
                now_s=before_s,
                criteria=GoldenCriteria(ended_before_s=before_s),
            )
            cal = p.calibration["all"]
            log(
                f"  {recipe}: v{p.version} from {len(p.batches)} good batches; median time to "
                f"target {duration(p.finish.median_s)}, late after {duration(p.finish.limit_s)}; "
                f"left out {len(p.selection.get('left_out', {}))} (later, unusual or with data "
                f"problems); {cal['n_flagged']}/{cal['n']} golden batches would have alerted "
                f"(target {p.calibration['target_rate']:.0%}) in "
                f"{time.perf_counter() - t0:.1f} s"
            )
    finally:
        store.close()


def _kj(value: float | None, stderr: float | None) -> str:
    """Ea for the demo's log: "65.2 ± 0.4 kJ/mol", or why there is no estimate."""
    if value is None:
        return "not estimated (held at the prior)"
    return f"{value / 1e3:.1f} ± {(stderr or 0.0) / 1e3:.1f} kJ/mol"


def run_demo(out_dir: str | Path = "var/demo", *, fast: bool = False, stream=None) -> dict:
    """Run the demo; returns the summary it prints."""
    console = board_console(stream)
    log = console.print
    out = Path(out_dir).resolve()
    out.mkdir(parents=True, exist_ok=True)
    log(
        "[bold]convmon demo[/bold] - invented sample plant (advisory only: not a control or "
        "safety system)"
    )
    if not SAMPLE_DB.exists():
        log("generating the sample plant export ...")
        generate(SAMPLE_DB)
    end_s = export_end(SAMPLE_DB)
    span_h = 8.0 if fast else 54.0  # the last 54 h: three batches start to end, two running
    replay_start = end_s - span_h * 3600
    for f in ("convmon.db", "live.db"):
        (out / f).unlink(missing_ok=True)
    hist_cfg = _config(out, SAMPLE_DB, {})
    log(f"1. fitting kinetics from history before {to_datetime(replay_start):%Y-%m-%d %H:%M} UTC")
    kinetics = _fit_kinetics(out, hist_cfg, replay_start, log)
    log("2. golden profiles from the good batches completed before the replay")
    _golden_profiles(_config(out, SAMPLE_DB, kinetics), replay_start, log)
    live_db = out / "live.db"
    cfg = _config(out, live_db, kinetics)
    tags = [u.temperature_tag for u in cfg.units]
    replay = Replay(SAMPLE_DB, live_db, tags)
    clock = {"t": replay_start}
    replay.start(replay_start)
    monitor = Monitor(cfg, clock=lambda: clock["t"])
    step_s = 3240.0 if not fast else 1800.0  # 54 plant-minutes a poll: 60 polls for 54 h
    ticks = int(span_h * 3600 / step_s)
    log(f"3. replaying {span_h:g} plant-hours in {ticks} polls of {step_s / 60:g} plant-min")
    history: dict = {}
    t_wall = time.perf_counter()
    pace_s = 0.0 if fast else 0.8  # wall seconds a poll, so a person can watch it converge
    with Live(console=console, refresh_per_second=4, transient=False) as live:
        for i in range(ticks + 1):
            tick_start = time.perf_counter()
            clock["t"] = replay_start + i * step_s
            replay.advance_to(clock["t"])
            rep = monitor.run_cycle_safely()
            doc = api.status(cfg)
            for r in doc["status"]:
                history.setdefault(r["batch"], []).append(
                    (r["at"], r["predicted_end"], r["predicted_end_p10"], r["predicted_end_p90"])
                )
            table = status_table(doc, cfg.site.timezone, now_s=clock["t"])
            table.title = (
                f"plant time {to_datetime(clock['t']):%Y-%m-%d %H:%M} UTC - poll "
                f"{i}/{ticks}" + (f", {rep.rows_read} rows" if rep else ", failed")
            )
            live.update(table)
            time.sleep(max(0.0, pace_s - (time.perf_counter() - tick_start)))
    replay.close()
    wall = time.perf_counter() - t_wall
    summary = _summary(monitor, history, out, kinetics, wall)
    log("4. how the forecasts converged (P50 and the P10-P90 width, first and last poll):")
    for line in summary["lines"]:
        log("   " + line)
    log("5. alerts raised during the replay (advisory):")
    for a in summary["alert_lines"] or ["none"]:
        log("   " + a)
    log(
        f"6. written: store {out / 'convmon.db'}, live historian {live_db}"
        + (f", kinetics {', '.join(str(p) for p in kinetics.values())}" if kinetics else "")
    )
    log("   next: convmon status --config <your plant.toml>; see README.md")
    return summary


def _summary(monitor, history, out, kinetics, wall) -> dict:
    counts = monitor.store.row_counts()
    lines = []
    for bid, pts in history.items():
        pts = [p for p in pts if p[1] and p[2] and p[3]]
        if not pts:
            continue
        (_, e0, lo0, hi0), (_, e1, lo1, hi1) = pts[0], pts[-1]
        ts = lambda x: datetime.fromisoformat(x).timestamp()  # noqa: E731
        lines.append(
            f"{bid}: P50 {to_datetime(ts(e0)):%H:%M} -> {to_datetime(ts(e1)):%H:%M} "
            f"UTC over {len(pts)} polls; band {(ts(hi0) - ts(lo0)) / 60:.0f} -> "
            f"{(ts(hi1) - ts(lo1)) / 60:.0f} min"
        )
    alerts = monitor.store.list_alerts()
    alert_lines = [f"{a['batch']} {a['kind']}: {a['message']}" for a in alerts]
    shutil.copyfile(out / "convmon.db", out / "convmon-final.db")
    return {
        "lines": lines,
        "alert_lines": alert_lines,
        "alert_kinds": sorted({(a["batch"], a["kind"]) for a in alerts}),
        "estimates": counts["estimates"],
        "alerts": counts["alerts"],
        "batches": counts["batches"],
        "wall_s": wall,
        "kinetics": {k: str(v) for k, v in kinetics.items()},
    }
