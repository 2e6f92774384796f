"""Write the invented sample plant as a SQLite historian export, plus its truth file.

Usage::

    python -m sample_historian.generate [--out sample_historian/plant.db] [--seed N] [--days D]

The export uses convmon's default narrow schema (``tag_samples`` and
``batch_events``). Beside ``plant.db`` it writes ``plant_truth.json``: the true
kinetics and per-batch figures, for tests only (the monitor never reads it).
The same seed always gives the same rows. Both files are replaced atomically.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sqlite3
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from . import scenario as sc
from .schedule import Batch, ScenarioError, Schedule, plan_schedule

DEFAULT_SEED = 20261005
DEFAULT_OUT = Path(__file__).resolve().parent / "plant.db"
TRUTH_FORMAT = "convmon-sample-plant-truth/1"
_CHUNK = 100_000

# Random streams: one per concern, so that changing one part leaves the others' draws alone.
_STREAM_SCHEDULE, _STREAM_TEMPERATURE, _STREAM_FAULTS = 1, 2, 3

_SCHEMA = (
    "CREATE TABLE tag_samples (seq INTEGER PRIMARY KEY, tag TEXT NOT NULL, ts TEXT NOT NULL, "
    "value REAL, quality INTEGER NOT NULL)",
    "CREATE TABLE batch_events (seq INTEGER PRIMARY KEY, batch_id TEXT NOT NULL, "
    "unit TEXT NOT NULL, recipe TEXT NOT NULL, event TEXT NOT NULL, ts TEXT NOT NULL)",
)
_INDEXES = (
    "CREATE INDEX ix_tag_samples_tag_ts ON tag_samples (tag, ts)",
    "CREATE INDEX ix_batch_events_batch ON batch_events (batch_id)",
    "CREATE INDEX ix_batch_events_unit_ts ON batch_events (unit, ts)",
)
_INSERT_SAMPLES = "INSERT INTO tag_samples (seq, tag, ts, value, quality) VALUES (?, ?, ?, ?, ?)"
_INSERT_EVENTS = (
    "INSERT INTO batch_events (seq, batch_id, unit, recipe, event, ts) VALUES (?, ?, ?, ?, ?, ?)"
)


def _rng(seed: int, stream: int) -> np.random.Generator:
    return np.random.default_rng([seed, stream])


class _Clock:
    """Seconds since the history start <-> ISO-8601 UTC text with milliseconds."""

    def __init__(self, t0: datetime):
        self.t0_ms = int(round(t0.timestamp() * 1000))

    def ms(self, t_s) -> np.ndarray:
        return np.round(np.asarray(t_s, dtype=float) * 1000.0).astype(np.int64)

    def iso_ms(self, rel_ms: np.ndarray) -> list[str]:
        stamps = (rel_ms + self.t0_ms).astype("datetime64[ms]")
        return [s + "+00:00" for s in np.datetime_as_string(stamps, unit="ms").tolist()]

    def iso(self, t_s: float | None) -> str | None:
        if t_s is None:
            return None
        return self.iso_ms(self.ms([t_s]))[0]


# ------------------------------------------------------------------------------ faults
def _nearest_batch(batches: list[Batch], unit: str, t_s: float) -> Batch:
    """The complete batch on ``unit`` that started nearest ``t_s`` (any unit if it has none)."""
    done = [b for b in batches if b.end_s is not None]
    on_unit = [b for b in done if b.unit.name == unit] or done
    if not on_unit:
        raise ScenarioError("the history is too short to hold a complete batch")
    return min(on_unit, key=lambda b: abs(b.start_s - t_s))


def _window_in(batch: Batch, offset_min: float, length_min: float) -> tuple[float, float]:
    lo = batch.start_s + 60.0 * offset_min
    hi = lo + 60.0 * length_min
    if hi > batch.end_s - 1800.0:  # keep the window inside the batch
        lo = batch.start_s + 3600.0
        hi = lo + 60.0 * length_min
    return float(round(lo)), float(round(hi))


def _plan_faults(rng: np.random.Generator, schedule: Schedule, history_s: float) -> dict:
    b = schedule.batches
    outage_batch = _nearest_batch(b, "R-101", 0.30 * history_s)
    gap_batch = _nearest_batch(b, "R-102", 0.55 * history_s)
    unc_batch = _nearest_batch(b, "R-103", 0.40 * history_s)
    return {
        "gaps": [
            {
                "kind": "collector outage: no rows for any temperature tag",
                "tags": [u.temperature_tag for u in sc.UNITS],
                "window": _window_in(outage_batch, 180.0, 12.0),
            },
            {
                "kind": "one transmitter's rows lost",
                "tags": [gap_batch.unit.temperature_tag],
                "window": _window_in(
                    gap_batch, 150.0 + rng.uniform(0.0, 30.0), float(rng.integers(15, 29))
                ),
            },
        ],
        "uncertain_windows": [
            {
                "kind": "transmitter under check: uncertain quality, extra noise",
                "tags": [unc_batch.unit.temperature_tag],
                "window": _window_in(unc_batch, 90.0, 40.0),
            }
        ],
    }


# ------------------------------------------------------------------------------ rows
def _temperature_rows(
    unit: sc.Unit,
    schedule: Schedule,
    export_end_s: float,
    clock: _Clock,
    faults: dict,
    rng: np.random.Generator,
):
    """Temperature samples of one unit: ts [ms], value [degC] or NaN, quality; and counts."""
    n = int(math.floor((export_end_s - unit.phase_s) / unit.period_s)) + 1
    grid_ms = clock.ms(unit.phase_s + unit.period_s * np.arange(n))
    ts_ms = grid_ms + rng.integers(-sc.JITTER_MS, sc.JITTER_MS + 1, size=n)
    ts_ms = np.clip(ts_ms, 0, clock.ms(export_end_s))
    true_k = schedule.traces[unit.name].at(ts_ms / 1000.0)
    value = true_k - sc.ZERO_CELSIUS_K + rng.normal(0.0, unit.noise_sd_k, size=n)
    quality = np.full(n, sc.OPC_GOOD, dtype=np.int64)

    n_spike = int(round(sc.SPIKE_FRACTION * n))
    n_unc = int(round(sc.UNCERTAIN_FRACTION * n))
    picked = rng.choice(n, size=n_spike + sc.NAN_PER_UNIT + n_unc, replace=False)
    spike, nan, unc = np.split(picked, [n_spike, n_spike + sc.NAN_PER_UNIT])
    value[spike] += rng.choice([-1.0, 1.0], size=n_spike) * rng.uniform(30.0, 300.0, n_spike)
    quality[spike] = sc.OPC_BAD
    value[nan] = np.nan
    quality[nan] = sc.OPC_BAD
    quality[unc] = sc.OPC_UNCERTAIN

    for w in faults["uncertain_windows"]:
        if unit.temperature_tag in w["tags"]:
            lo, hi = clock.ms(w["window"])
            sel = (ts_ms >= lo) & (ts_ms < hi) & (quality == sc.OPC_GOOD)
            value[sel] += rng.normal(0.0, 0.8, size=int(sel.sum()))
            quality[sel] = sc.OPC_UNCERTAIN
    keep = np.ones(n, dtype=bool)
    for g in faults["gaps"]:
        if unit.temperature_tag in g["tags"]:
            lo, hi = clock.ms(g["window"])
            keep &= ~((ts_ms >= lo) & (ts_ms < hi))
    value = np.round(value, 3)
    counts = {
        "spikes": int(np.count_nonzero(keep[spike])),
        "nan": int(np.count_nonzero(keep[nan])),
        "uncertain": int(np.count_nonzero(keep & (quality == sc.OPC_UNCERTAIN))),
    }
    return ts_ms[keep], value[keep], quality[keep], counts


def _lab_rows(schedule: Schedule, export_end_s: float):
    """Charge and assay rows: (tag, ts [s], value, quality, arrival [s]) that arrived in time."""
    rows = []
    for b in schedule.batches:
        if b.charge_arrival_s <= export_end_s:
            rows.append((b.unit.charge_tag, b.start_s, b.c_a0, sc.OPC_GOOD, b.charge_arrival_s))
        for a in b.assays:
            if a.arrival_s <= export_end_s:
                rows.append((b.unit.assay_tag, a.sample_s, a.value, a.quality, a.arrival_s))
    return rows


def _sample_table(schedule, export_end_s, clock, faults, rng):
    tags = [t for u in sc.UNITS for t in (u.temperature_tag, u.assay_tag, u.charge_tag)]
    code = {t: i for i, t in enumerate(tags)}
    parts_tag, parts_ts, parts_val, parts_q, parts_arr = [], [], [], [], []
    counts = {}
    for u in sc.UNITS:
        ts, val, q, c = _temperature_rows(u, schedule, export_end_s, clock, faults, rng)
        counts[u.temperature_tag] = c
        parts_tag.append(np.full(len(ts), code[u.temperature_tag]))
        parts_ts.append(ts)
        parts_val.append(val)
        parts_q.append(q)
        parts_arr.append(ts)  # temperatures reach the historian as they are sampled
    lab = _lab_rows(schedule, export_end_s)
    parts_tag.append(np.array([code[r[0]] for r in lab], dtype=np.int64))
    parts_ts.append(clock.ms([r[1] for r in lab]))
    parts_val.append(np.array([r[2] for r in lab], dtype=float))
    parts_q.append(np.array([r[3] for r in lab], dtype=np.int64))
    parts_arr.append(clock.ms([r[4] for r in lab]))
    tag, ts, val, q, arr = (
        np.concatenate(p) for p in (parts_tag, parts_ts, parts_val, parts_q, parts_arr)
    )
    order = np.lexsort((ts, tag, arr))  # arrival order gives seq
    tag, ts, val, q = tag[order], ts[order], val[order], q[order]
    values = [None if math.isnan(v) else v for v in val.tolist()]
    names = [tags[i] for i in tag.tolist()]
    rows = zip(range(1, len(ts) + 1), names, clock.iso_ms(ts), values, q.tolist(), strict=True)
    return rows, len(ts), counts


def _event_rows(schedule: Schedule, clock: _Clock):
    events = []
    for b in schedule.batches:
        events.append((b.start_s, 0, b.batch_id, b.unit.name, b.recipe.name, "start"))
        if b.end_s is not None:
            events.append((b.end_s, 1, b.batch_id, b.unit.name, b.recipe.name, "end"))
    events.sort()
    stamps = clock.iso_ms(clock.ms([e[0] for e in events]))
    return [
        (i + 1, e[2], e[3], e[4], e[5], ts)
        for i, (e, ts) in enumerate(zip(events, stamps, strict=True))
    ]


# ------------------------------------------------------------------------------ truth
def _recipe_truth(r: sc.Recipe) -> dict:
    d = {
        "description": r.description,
        "rate_law": r.rate_law,
        "k_ref": r.k_ref,
        "k_ref_unit": f"s^-1 (L/mol)^{r.order - 1:g}" if r.rate_law == "power" else "L/(mol*s)",
        "t_ref_k": r.t_ref_k,
        "ea_j_per_mol": r.ea_j_per_mol,
        "activity_sd": r.activity_sd,
        "c_a0_nominal": r.c_a0_nominal,
        "assay_kind": r.assay_kind,
        "assay_sd": r.assay_sd,
        "target_conversion": r.target_conversion,
        "temperature_plan": [list(p) for p in r.plan],
        "plan_unit": "degC",
    }
    if r.rate_law == "power":
        d["order"] = r.order
    else:
        d.update(order=2.0, theta_b=r.theta_b, b=r.b)
    return d


def _batch_truth(b: Batch, clock: _Clock, export_end_s: float) -> dict:
    running = b.end_s is None
    x_end = None if running else float(b.kinetics.x_at(b.end_s))
    pending = [a for a in b.assays if a.arrival_s > export_end_s]
    shown = [a for a in b.assays if a.arrival_s <= export_end_s]
    ttt = b.time_to_target_s
    return {
        "batch": b.batch_id,
        "unit": b.unit.name,
        "recipe": b.recipe.name,
        "state": "running" if running else "complete",
        "start": clock.iso(b.start_s),
        "end": clock.iso(b.end_s),
        "c_a0": b.c_a0,
        "activity": b.activity,
        "drift_factor": b.drift_factor,
        "temperature_at_start_k": b.temperature_at_start_k,
        "conversion_at_end": x_end,
        "conversion_at_export_end": float(b.kinetics.x_at(export_end_s)) if running else None,
        "time_to_target": clock.iso(ttt),
        "time_to_target_h": None if ttt is None else (ttt - b.start_s) / 3600.0,
        "target_reached_before_end": None if running or ttt is None else ttt <= b.end_s,
        "operators_saw_passing_assay": clock.iso(b.trigger_arrival_s),
        "assays": [
            {
                "ts": clock.iso(a.sample_s),
                "arrival": clock.iso(a.arrival_s),
                "value": None if math.isnan(a.value) else a.value,
                "quality": a.quality,
                "true_conversion": a.true_x,
                "true_concentration": a.true_c_a,
                "note": a.note,
            }
            for a in shown
        ],
        "pending_assays": [
            {
                "ts": clock.iso(a.sample_s),
                "arrival": clock.iso(a.arrival_s),
                "true_conversion": a.true_x,
            }
            for a in pending
            if a.sample_s <= export_end_s
        ],
    }


def _fault_truth(faults: dict, schedule: Schedule, clock: _Clock, counts: dict) -> dict:
    def windows(items):
        out = []
        for w in items:
            lo, hi = w["window"]
            units = {u.name for u in sc.UNITS if u.temperature_tag in w["tags"]}
            hit = [
                b.batch_id
                for b in schedule.batches
                if b.unit.name in units and b.start_s < hi and (b.end_s is None or b.end_s > lo)
            ]
            out.append(
                {
                    "kind": w["kind"],
                    "tags": w["tags"],
                    "start": clock.iso(lo),
                    "end": clock.iso(hi),
                    "duration_s": hi - lo,
                    "batches": hit,
                }
            )
        return out

    lab = {}
    for b in schedule.batches:
        for a in b.assays:
            if a.note:
                lab[f"{a.note}_assay"] = {
                    "batch": b.batch_id,
                    "tag": b.unit.assay_tag,
                    "ts": clock.iso(a.sample_s),
                    "value": None if math.isnan(a.value) else a.value,
                    "true_conversion": a.true_x,
                }
    return {
        "gaps": windows(faults["gaps"]),
        "uncertain_windows": windows(faults["uncertain_windows"]),
        **lab,
        "temperature_quality": counts,
        "nan_storage": "NaN values are stored as NULL (SQLite has no NaN)",
    }


# ------------------------------------------------------------------------------ writing
def _write_db(path: Path, samples, events) -> None:
    if path.exists():
        path.unlink()
    con = sqlite3.connect(path)
    try:
        con.execute("PRAGMA journal_mode = OFF")  # a temporary file, renamed when complete
        con.execute("PRAGMA synchronous = OFF")
        with con:
            for stmt in _SCHEMA:
                con.execute(stmt)
            while True:
                chunk = [row for _, row in zip(range(_CHUNK), samples, strict=False)]
                if not chunk:
                    break
                con.executemany(_INSERT_SAMPLES, chunk)
            con.executemany(_INSERT_EVENTS, events)
            for stmt in _INDEXES:
                con.execute(stmt)
    finally:
        con.close()


def truth_path_for(db_path: str | os.PathLike) -> Path:
    """``plant.db`` -> ``plant_truth.json`` beside it."""
    p = Path(db_path)
    return p.with_name(f"{p.stem}_truth.json")


def generate(
    db_path: str | os.PathLike, seed: int = DEFAULT_SEED, *, days: float | None = None
) -> dict:
    """Generate the sample plant into ``db_path`` and its truth beside it; return the truth.

    Parameters
    ----------
    db_path : path-like
        The SQLite file to write (replaced atomically if it exists).
    seed : int
        Seed of all random draws; the same seed gives the same rows.
    days : float, optional
        Length of the history [d]; default ``scenario.DEFAULT_DAYS`` (28).
    """
    days = sc.DEFAULT_DAYS if days is None else float(days)
    if not 3 <= days <= 120:
        raise ValueError(f"days must be between 3 and 120, got {days!r}")
    db_path = Path(db_path)
    t0 = datetime.fromisoformat(sc.HISTORY_START).astimezone(UTC)
    clock = _Clock(t0)
    schedule = plan_schedule(_rng(seed, _STREAM_SCHEDULE), t0, days)
    export_end_s = days * 86400.0 + sc.EXPORT_END_OFFSET_S
    faults = _plan_faults(_rng(seed, _STREAM_FAULTS), schedule, export_end_s)
    samples, n_samples, counts = _sample_table(
        schedule, export_end_s, clock, faults, _rng(seed, _STREAM_TEMPERATURE)
    )
    events = _event_rows(schedule, clock)

    running = [b for b in schedule.batches if b.end_s is None]
    drifted = [b.batch_id for b in schedule.batches if b.drift_factor < 1.0]
    truth = {
        "format": TRUTH_FORMAT,
        "about": "the truth behind the invented sample plant; for tests only, never read by "
        "the monitor",
        "seed": seed,
        "days": days,
        "site": {"name": sc.SITE_NAME, "timezone": sc.SITE_TIMEZONE},
        "history_start": clock.iso(0.0),
        "export_end": clock.iso(export_end_s),
        "quality_codes": {"good": sc.OPC_GOOD, "uncertain": sc.OPC_UNCERTAIN, "bad": sc.OPC_BAD},
        "recipes": {name: _recipe_truth(r) for name, r in sc.RECIPES.items()},
        "units": {
            u.name: {
                "temperature_tag": u.temperature_tag,
                "assay_tag": u.assay_tag,
                "charge_tag": u.charge_tag,
                "period_s": u.period_s,
                "lag_tau_s": u.lag_tau_s,
                "idle_tau_s": u.idle_tau_s,
                "noise_sd_k": u.noise_sd_k,
                "ambient_degc": u.ambient_degc,
                "campaigns": [list(c) for c in u.campaigns],
            }
            for u in sc.UNITS
        },
        "batches": [_batch_truth(b, clock, export_end_s) for b in schedule.batches],
        "drift": {
            "recipe": sc.DRIFT_RECIPE,
            "onset": clock.iso(schedule.drift_onset_s),
            "factor_per_batch": sc.DRIFT_FACTOR_PER_BATCH,
            "batches": drifted,
        },
        "counts": {
            "tag_samples": n_samples,
            "batch_events": len(events),
            "batches": len(schedule.batches),
            "complete_batches": len(schedule.batches) - len(running),
            "running_batches": len(running),
        },
    }
    truth["faults"] = _fault_truth(faults, schedule, clock, counts)

    truth_path = truth_path_for(db_path)
    db_path.parent.mkdir(parents=True, exist_ok=True)
    tmp_db = db_path.with_name(f".{db_path.name}.{os.getpid()}.tmp")
    tmp_truth = truth_path.with_name(f".{truth_path.name}.{os.getpid()}.tmp")
    try:
        _write_db(tmp_db, samples, events)
        tmp_truth.write_text(json.dumps(truth, indent=1, allow_nan=False) + "\n", encoding="utf-8")
        os.replace(tmp_db, db_path)
        os.replace(tmp_truth, truth_path)
    finally:
        for p in (tmp_db, tmp_truth):
            p.unlink(missing_ok=True)
    return truth


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m sample_historian.generate",
        description="Write the invented sample plant's historian export (SQLite) and its truth "
        "file. Example: python -m sample_historian.generate --out /tmp/plant.db --seed 7",
    )
    parser.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help=f"SQLite file to write (default: {DEFAULT_OUT})",
    )
    parser.add_argument(
        "--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default: {DEFAULT_SEED})"
    )
    parser.add_argument(
        "--days",
        type=float,
        default=None,
        help=f"length of the history in days (default: {sc.DEFAULT_DAYS})",
    )
    args = parser.parse_args(argv)
    t = time.perf_counter()
    try:
        truth = generate(args.out, args.seed, days=args.days)
    except ValueError as exc:
        parser.error(str(exc))
    elapsed = time.perf_counter() - t
    c = truth["counts"]
    print(
        f"wrote {args.out} ({args.out.stat().st_size / 1e6:.1f} MB) and "
        f"{truth_path_for(args.out).name}: {c['tag_samples']} samples, {c['batches']} batches "
        f"({c['complete_batches']} complete, {c['running_batches']} running), "
        f"{truth['history_start']} .. {truth['export_end']}, seed {args.seed}, "
        f"{elapsed:.1f} s",
        file=sys.stderr,
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
