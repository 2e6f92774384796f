"""The library API the CLI calls: one function per job, no printing."""

from __future__ import annotations

import os
import time
from collections.abc import Callable
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
from .config.versions import config_version
from .errors import DataQualityError, MonitorError, UsageError
from .fleet.golden_job import build_golden, show_golden
from .historian.model import Batch
from .historian.reader import HistorianReader
from .outputs.documents import batch_json
from .outputs.golden_chart import golden_chart
from .outputs.golden_text import golden_json, golden_lines
from .store import Store


def parse_time(text: str, zone: str, option: str = "--at") -> float:
    """A time from the command line (ISO 8601; without an offset it is in ``zone``) [s];
    a time that cannot be read is a `UsageError` naming ``option``."""
    try:
        return timefmt.parse_time(text, zone)
    except ValueError as exc:
        raise UsageError(f"{option}: {exc}") from None


def open_reader(cfg: Config) -> HistorianReader:
    """A reader of the site's historian export (read-only)."""
    return HistorianReader(cfg)


def _configured(what: str, name: str | None, names: list[str], key: str) -> None:
    """Refuse a --unit or --recipe the configuration does not have, listing those it has."""
    if name is None or name in names:
        return
    have = ", ".join(repr(n) for n in names) if names else f"none (no {key} in the file)"
    raise UsageError(f"--{what}: {what} {name!r} is not configured; configured: {have}")


def list_batches(cfg: Config, unit: str | None = None, recipe: str | None = None):
    """Batches in the export with their good-sample counts, and any event problems.

    ``unit`` and ``recipe`` filter; a name the configuration does not have is refused
    (`UsageError`, listing those it has) rather than answered with an empty list.
    """
    _configured("unit", unit, [u.name for u in cfg.units], "[[units]]")
    _configured("recipe", recipe, list(cfg.recipes), "[recipes.NAME]")
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
    last temperature sample); a completed batch at its end. An ``at_s`` before the
    batch started, or after its last temperature sample in the export, is refused
    (`UsageError`): an estimate only looks back, never ahead of its data.
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
        if at_s is not None:
            _refuse_time_travel(cfg, reader, b, at_s, data.temperature.t_s)
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
    est.config_version = config_version(cfg, b.recipe, b.unit)
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


def _refuse_time_travel(cfg: Config, reader, b: Batch, at_s: float, t_upto) -> None:
    """``--at`` after the batch's last temperature sample in the export is refused
    (exit 2), naming that sample's time in plant local time and in UTC."""
    if len(t_upto) and at_s <= float(t_upto[-1]):
        return
    u = cfg.unit(b.unit)
    if u is None:
        return  # read_batch has refused the batch already
    later, _ = reader.read_tags([u.temperature_tag], at_s, b.end_s)
    if len(later[u.temperature_tag]):
        return  # data after --at exists: a look back
    zone = cfg.site.timezone
    when = f"{timefmt.local(at_s, zone)} ({timefmt.iso(at_s)})"
    if not len(t_upto):
        raise UsageError(
            f"--at {when}: batch {b.batch!r} has no good temperature data ({u.temperature_tag}) "
            "in the export up to then"
        )
    last = float(t_upto[-1])
    raise UsageError(
        f"--at {when} is after the last data of batch {b.batch!r}: its last temperature sample "
        f"is at {timefmt.local(last, zone)} ({timefmt.iso(last)}); an estimate cannot look "
        "past its data: give a time at or before it, or leave --at out for the latest"
    )


def _unit_tag(cfg: Config, unit: str) -> str:
    u = cfg.unit(unit)
    return u.temperature_tag if u else f"unit {unit} (not configured)"


def status(cfg: Config) -> dict:
    """The ``status`` document: the newest estimate of each running batch, its open
    alerts, and the monitor's heartbeat.

    Each row says whether it was computed with the recipe's current kinetics and
    configuration (`kinetics_current`, `config_current`: true, false, or null when
    that cannot be told); a row that was not leads its warnings with why.
    """
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
    current = _CurrentVersions(cfg)
    for r in rows:
        r["alerts"] = kinds.get(r["batch"], [])
        current.mark(r)
    return {
        "status": rows,
        "heartbeat": {
            "last_good_cycle": timefmt.iso(beat["last_good_cycle_s"]) if beat else None,
            "last_data": timefmt.iso(beat["last_data_s"]) if beat else None,
            "cycles": beat["cycles"] if beat else 0,
            "failed_cycles": beat["failed_cycles"] if beat else 0,
        },
    }


class _CurrentVersions:
    """The kinetics and configuration versions a recipe's estimates are made with now."""

    def __init__(self, cfg: Config):
        self.cfg = cfg
        self._kinetics: dict[str, str | MonitorError] = {}

    def _kinetics_version(self, recipe: str) -> str | MonitorError:
        if recipe not in self._kinetics:
            try:
                self._kinetics[recipe] = load_kinetics(self.cfg.recipe(recipe).kinetics).version
            except MonitorError as exc:  # the file as it is now cannot be used
                self._kinetics[recipe] = exc
        return self._kinetics[recipe]

    def mark(self, row: dict) -> None:
        """Add ``kinetics_current`` and ``config_current`` to a status row; a row made with
        other kinetics or configuration (or one that cannot be checked) leads its
        warnings with it."""
        recipe, unit = row.get("recipe"), row.get("unit")
        said: list[str] = []
        if self.cfg.recipe(recipe) is None:
            row["kinetics_current"] = row["config_current"] = None
            said.append(
                f"recipe {recipe!r} is no longer configured: the kinetics and configuration "
                "this estimate was made with cannot be checked"
            )
        else:
            kin = self._kinetics_version(recipe)
            made = row.get("kinetics_version")
            if isinstance(kin, MonitorError):
                row["kinetics_current"] = None
                said.append(
                    f"the recipe's kinetics file cannot be used now ({kin}); "
                    f"this estimate was made with kinetics {made}"
                )
            else:
                row["kinetics_current"] = made == kin
                if made != kin:
                    said.append(
                        f"not current: made with kinetics {made}, the recipe's kinetics are now "
                        f"{kin}; `convmon run` re-estimates it at its next cycle"
                    )
            made_cfg, now_cfg = row.get("config_version"), config_version(self.cfg, recipe, unit)
            row["config_current"] = None if not made_cfg else made_cfg == now_cfg
            if made_cfg and made_cfg != now_cfg:
                said.append(
                    f"not current: made with another configuration of recipe {recipe!r} or unit "
                    f"{unit!r} ({made_cfg}, now {now_cfg}); `convmon run` re-estimates it at "
                    "its next cycle"
                )
        row["warnings"] = said + list(row.get("warnings") or [])


def alert_json(a: dict) -> dict:
    """An alert row as the ``alerts`` document shows it: its acknowledgements oldest
    first (``acks``), and ``acked_by`` the latest name (null: none)."""
    acks = [
        {"by": k["acked_by"], "at": timefmt.iso(k["acked_at_s"]), "note": k["note"]}
        for k in a.get("acks", [])
    ]
    return {
        "id": a["id"],
        "batch": a["batch"],
        "kind": a["kind"],
        "severity": a["severity"],
        "state": a["state"],
        "raised_at": timefmt.iso(a["raised_at_s"]),
        "cleared_at": timefmt.iso(a["cleared_at_s"]),
        "acked_by": acks[-1]["by"] if acks else None,
        "acks": acks,
        "message": a["message"],
    }


def list_alerts(cfg: Config, *, open_only: bool = False) -> dict:
    """The ``alerts`` document (``open_only``: those whose condition still holds)."""
    store = Store(cfg.store.url)
    try:
        return {"alerts": [alert_json(a) for a in store.list_alerts(open_only=open_only)]}
    finally:
        store.close()


def ack_alert(
    cfg: Config,
    alert_id: int,
    by: str,
    note: str | None = None,
    *,
    clock: Callable[[], float] = time.time,
) -> dict:
    """Acknowledge an alert: who, when (``clock``, the wall clock) and an optional note
    are appended to its history; returns the alert. An empty name is refused."""
    if not by.strip():
        raise UsageError("--by: give the name of who acknowledges the alert")
    store = Store(cfg.store.url)
    try:
        return alert_json(store.ack_alert(alert_id, by, clock(), note or None))
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
