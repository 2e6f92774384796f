"""The library API the CLI calls: one function per job, no printing."""

from __future__ import annotations

import os
import time
from dataclasses import dataclass
from pathlib import Path

from . import timefmt
from .batch.estimator import Estimate, estimate
from .batch.findings import Finding, Kind, Severity
from .batch.golden_profile import GoldenProfile
from .batch.kinetics import Kinetics
from .batch.state import state_from_data
from .config import DEFAULT_CONFIG, ENV_VAR, Config, load_config, load_kinetics
from .config.models import recipe_model
from .errors import DataQualityError, UsageError
from .fleet.golden_job import build_golden, show_golden
from .historian.model import Batch
from .historian.reader import HistorianReader
from .outputs.documents import batch_json
from .outputs.golden_chart import golden_chart
from .outputs.golden_text import golden_json, golden_lines
from .store import Store


def parse_time(text: str, zone: str) -> float:
    """A time from the command line (ISO 8601; without an offset it is in ``zone``) [s]."""
    try:
        return timefmt.parse_time(text, zone)
    except ValueError as exc:
        raise UsageError(f"--at: {exc}") from None


def open_reader(cfg: Config) -> HistorianReader:
    """A reader of the site's historian export (read-only)."""
    return HistorianReader(cfg)


def list_batches(cfg: Config, unit: str | None = None, recipe: str | None = None):
    """Batches in the export with their good-sample counts, and any event problems."""
    reader = open_reader(cfg)
    try:
        batches, problems = reader.batches(unit=unit, recipe=recipe)
        if not batches and unit is None and recipe is None and not problems:
            raise DataQualityError(
                f"the export has no batches: no {cfg.historian.start_event!r} events in table "
                f"{cfg.historian.events_table!r} (check historian.start_event and events_table)"
            )
        counts = reader.sample_counts(batches) if batches else {}
    finally:
        reader.close()
    return batches, counts, problems


def batches_document(cfg: Config, unit: str | None = None, recipe: str | None = None) -> dict:
    """The ``batches`` document: each batch with its good-sample counts, and the problems
    found in the events table (one message each)."""
    batches, counts, problems = list_batches(cfg, unit, recipe)
    return {
        "batches": [batch_json(b, counts.get(b.batch, (0, 0))) for b in batches],
        "problems": [p.message for p in problems],
    }


def estimate_batch(
    cfg: Config,
    batch_id: str,
    at_s: float | None = None,
    now_s: float | None = None,
    *,
    reader=None,
) -> tuple[Estimate, Batch]:
    """Estimate one batch straight from the historian.

    A running batch is estimated at ``at_s``, else at ``now_s`` (default: the
    last temperature sample); a completed batch at its end.
    """
    own = reader is None
    reader = reader or open_reader(cfg)
    try:
        b = reader.batch(batch_id)
        until = at_s if at_s is not None else b.end_s
        if at_s is not None and at_s < b.start_s:
            raise UsageError(f"--at is before batch {batch_id} started ({b.start.isoformat()})")
        if at_s is not None and b.end_s is not None:
            until = min(at_s, b.end_s)
        data = reader.read_batch(b, until_s=until)
    finally:
        if own:
            reader.close()
    if len(data.temperature) == 0:
        raise DataQualityError(
            f"batch {batch_id}: no good temperature samples "
            f"({_unit_tag(cfg, b.unit)}) in its window"
        )
    model = recipe_model(cfg, b.recipe)
    state = state_from_data(data, model, cfg.estimator.max_gap_s)
    at = until if until is not None else (now_s or float(data.temperature.t_s[-1]))
    rc = cfg.recipe(b.recipe)
    est = estimate(state, at, cfg.estimator, safety=rc.safety)
    summary = data.quality.as_rows()
    if summary:
        est.findings.append(
            Finding(
                Kind.EXCLUDED_SAMPLES,
                Severity.INFO,
                "excluded samples: "
                + ", ".join(f"{r['tag']} {r['reason']} ×{r['count']}" for r in summary),
                {"excluded": summary},
            )
        )
    return est, b


def _unit_tag(cfg: Config, unit: str) -> str:
    u = cfg.unit(unit)
    return u.temperature_tag if u else f"unit {unit} (not configured)"


def status(cfg: Config) -> dict:
    """The ``status`` document: the newest estimate of each running batch, its open
    alerts, and the monitor's heartbeat."""
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
    return {
        "status": rows,
        "heartbeat": {
            "last_good_cycle": timefmt.iso(beat["last_good_cycle_s"]) if beat else None,
            "last_data": timefmt.iso(beat["last_data_s"]) if beat else None,
            "cycles": beat["cycles"] if beat else 0,
            "failed_cycles": beat["failed_cycles"] if beat else 0,
        },
    }


def alert_json(a: dict) -> dict:
    """An alert row as the ``alerts`` document shows it."""
    return {
        "id": a["id"],
        "batch": a["batch"],
        "kind": a["kind"],
        "severity": a["severity"],
        "state": a["state"],
        "raised_at": timefmt.iso(a["raised_at_s"]),
        "cleared_at": timefmt.iso(a["cleared_at_s"]),
        "acked_by": a["acked_by"],
        "message": a["message"],
    }


def list_alerts(cfg: Config, *, open_only: bool = False) -> dict:
    """The ``alerts`` document (``open_only``: those whose condition still holds)."""
    store = Store(cfg.store.url)
    try:
        return {"alerts": [alert_json(a) for a in store.list_alerts(open_only=open_only)]}
    finally:
        store.close()


def ack_alert(cfg: Config, alert_id: int, by: str) -> dict:
    """Acknowledge an alert: who saw it is recorded; returns the alert."""
    store = Store(cfg.store.url)
    try:
        return alert_json(store.ack_alert(alert_id, by))
    finally:
        store.close()


def optional_config(path: str | os.PathLike | None) -> Config | None:
    """The configuration at ``path``; without one, the default file if it exists, else None.

    For jobs that can run without a site (a lab fit): a file the user named must load,
    the default one may be absent.
    """
    if path is None and not Path(os.environ.get(ENV_VAR) or DEFAULT_CONFIG).exists():
        return None
    return load_config(path)


def lab_prior(cfg: Config | None, recipe: str | None) -> tuple[Kinetics | None, Path | None]:
    """The prior for a lab fit: the recipe's current kinetics file, when the
    configuration has the recipe and the file exists; else ``(None, None)``."""
    rc = cfg.recipe(recipe) if cfg is not None and recipe else None
    if rc is None or not Path(rc.kinetics).exists():
        return None, None
    return load_kinetics(rc.kinetics), Path(rc.kinetics)


@dataclass(frozen=True)
class GoldenOutcome:
    """A golden profile as a command shows it: stored or built just now, and its chart."""

    profile: GoldenProfile
    stored: bool
    chart: str | None
    temperature_unit: str

    def document(self) -> dict:
        return golden_json(self.profile, stored=self.stored, chart=self.chart)

    def lines(self, zone: str) -> list[str]:
        return golden_lines(self.profile, zone, stored=self.stored, unit=self.temperature_unit)


def golden_build(
    cfg: Config,
    recipe: str,
    *,
    batches: list[str] | None = None,
    now_s: float | None = None,
    progress=None,
    chart: str | Path | None = None,
) -> GoldenOutcome:
    """Build the recipe's golden profile from history and store it as a new version
    (``chart``: also draw it there)."""
    model = recipe_model(cfg, recipe)  # a recipe without its table is a configuration error
    store = Store(cfg.store.url)
    try:
        profile = build_golden(
            cfg,
            recipe,
            store,
            now_s=now_s or time.time(),
            batches=batches,
            progress=progress,
            model=model,
        )
    finally:
        store.close()
    return _outcome(cfg, profile, True, chart)


def golden_show(
    cfg: Config,
    recipe: str,
    *,
    now_s: float | None = None,
    progress=None,
    chart: str | Path | None = None,
) -> GoldenOutcome:
    """The recipe's latest stored golden profile, else one built now from history and
    not stored (``chart``: draw it there)."""
    model = recipe_model(cfg, recipe)
    store = Store(cfg.store.url)
    try:
        profile, stored = show_golden(
            cfg, recipe, store, now_s=now_s or time.time(), progress=progress, model=model
        )
    finally:
        store.close()
    return _outcome(cfg, profile, stored, chart)


def _outcome(cfg: Config, profile: GoldenProfile, stored: bool, chart) -> GoldenOutcome:
    rc = cfg.recipe(profile.recipe)
    unit = rc.plan_unit if rc is not None else "degC"  # people read a recipe in its plan's unit
    path = str(golden_chart(profile, chart, unit=unit)) if chart else None
    return GoldenOutcome(profile, stored, path, unit)
