"""Terminal text for people: the batch list, the status table and its plain lines, the
alert list, an estimate's summary."""

from __future__ import annotations

import sys
from datetime import datetime
from zoneinfo import ZoneInfo

from rich.console import Console
from rich.table import Table

from ..timefmt import duration, from_iso, iso, local
from ..units import from_kelvin

CAUTION = "advisory only - not a control or safety system"


def _clock(iso: str | None, zone: str) -> str:
    """A short local time: weekday and hh:mm."""
    if iso is None:
        return "-"
    return datetime.fromisoformat(iso).astimezone(ZoneInfo(zone)).strftime("%a %H:%M")


def status_table(doc: dict, zone: str, now_s: float | None = None) -> Table:
    beat = doc.get("heartbeat") or {}
    last = from_iso(beat.get("last_good_cycle"))
    title = f"running batches - last good cycle {local(last, zone) if last else '-'}"
    table = Table(title=title, caption=f"times in {zone}; {CAUTION}")
    for col, justify in (
        ("unit", "left"),
        ("batch", "left"),
        ("recipe", "left"),
        ("elapsed", "right"),
        ("X ± sd", "right"),
        ("T °C", "right"),
        ("P50 end", "right"),
        ("P10 - P90", "right"),
        ("vs golden", "right"),
        ("alerts", "left"),
        ("data age", "right"),
    ):
        table.add_column(col, justify=justify)
    for r in doc.get("status", []):
        at, start = from_iso(r["at"]), from_iso(r["start"])
        ref = now_s if now_s is not None else at
        band = "-"
        if r.get("predicted_end_p10") and r.get("predicted_end_p90"):
            band = (
                f"{_clock(r['predicted_end_p10'], zone)[4:]} - "
                f"{_clock(r['predicted_end_p90'], zone)[4:]}"
            )
        if r.get("model_contradicted"):
            p50, band = "model contradicted", "-"
        elif r.get("predicted_end"):
            p50 = _clock(r["predicted_end"], zone)
        else:
            p50 = (r.get("forecast_note") or "-")[:30]
        temp = r.get("temperature_k")
        table.add_row(
            r["unit"],
            r["batch"],
            r["recipe"],
            f"{(at - start) / 3600:.1f} h",
            f"{r['conversion']:.3f} ± {r['conversion_sd']:.3f}",
            "-" if temp is None else f"{from_kelvin(temp, 'degC'):.1f}",
            p50,
            band,
            golden_lag(r.get("golden")),
            ", ".join(r.get("alerts", [])) or "-",
            duration(max(ref - at, 0.0)),
        )
    return table


def golden_lag(g: dict | None) -> str:
    """How far a batch is from its golden band, compactly: "+38 min" behind the median
    good batch ("!" when beyond the limit), "early" before conversion can be compared."""
    if not g:
        return "-"
    lag = g.get("lag_min")
    if lag is None:
        return "early"
    mark = "!" if "behind_profile" in g.get("off_profile", ()) else ""
    return f"{lag:+.0f} min{mark}"


def status_lines(doc: dict, zone: str, now_s: float) -> list[str]:
    """The ``status`` document as plain lines (for a pipe: no table, no control codes)."""
    beat = doc.get("heartbeat") or {}
    lines = [f"{local(now_s, zone)} last good cycle {beat.get('last_good_cycle')}"]
    for r in doc["status"]:
        age = (now_s - from_iso(r["at"])) / 60
        lines.append(
            f"{r['unit']} {r['batch']} {r['recipe']} X={r['conversion']:.3f}"
            f"±{r['conversion_sd']:.3f} P50={r['predicted_end']} "
            f"P10={r['predicted_end_p10']} P90={r['predicted_end_p90']} "
            f"golden_lag={golden_lag(r.get('golden')).replace(' ', '')} "
            f"alerts={','.join(r['alerts']) or '-'} data_age_min={age:.0f}"
        )
    return lines


def batches_table(doc: dict, zone: str) -> Table:
    """The ``batches`` document as a table, times in plant local time."""
    table = Table(
        title=f"{len(doc['batches'])} batches",
        caption=f"times in {zone}; sample counts are good samples in the batch window",
    )
    for col in ("batch", "unit", "recipe", "start", "end", "state", "temperatures", "assays"):
        table.add_column(col, justify="right" if col in ("temperatures", "assays") else "left")
    for d in doc["batches"]:
        table.add_row(
            d["batch"],
            d["unit"],
            d["recipe"],
            local(from_iso(d["start"]), zone),
            local(from_iso(d["end"]), zone),
            d["state"],
            str(d["n_temperature"]),
            str(d["n_assays"]),
        )
    return table


def alerts_text(doc: dict) -> str:
    """The ``alerts`` document, one line per alert."""
    lines = [
        f"{d['id']:>5} {d['state']:<8} {d['severity']:<8} {d['batch']:<12} {d['kind']:<20} "
        f"{d['raised_at']}  {d['message']}"
        for d in doc["alerts"]
    ]
    return "\n".join(lines) or "no alerts"


def console(stream=None):
    """A rich console; off a terminal it is 120 columns wide so the table stays readable."""
    stream = stream or sys.stdout
    return Console(file=stream, width=None if stream.isatty() else 120)


def estimate_text(e, zone: str) -> str:
    """A short summary an operator can read at a glance."""
    lines = []
    if e.model_contradicted:
        lines.append("MODEL CONTRADICTED BY EVERY ASSAY: the figures below are not trustworthy")
    lines += [
        f"batch {e.batch} on {e.unit} ({e.recipe}), at {local(e.at_s, zone)} [{iso(e.at_s)}]",
        f"  conversion   {e.conversion:.3f} ± {e.conversion_sd:.3f}"
        f"   (target {e.target_conversion:g}; activity {e.activity:.3f} ± "
        f"{e.activity_sd:.3f}; {e.n_assays_used} assay(s) used)",
    ]
    if e.temperature_k is not None:
        lines.append(f"  temperature  {from_kelvin(e.temperature_k, 'degC'):.1f} degC")
    if e.model_contradicted:
        lines.append("  target at    not shown: the model is contradicted by the assays")
    elif e.predicted_end_s is not None:
        lines.append(f"  target at    {local(e.predicted_end_s, zone)}  [{iso(e.predicted_end_s)}]")
        lines.append(
            f"  P10 - P90    {local(e.predicted_end_p10_s, zone)}  to  "
            f"{local(e.predicted_end_p90_s, zone)}"
        )
    if e.forecast_note:
        lines.append(f"  note         {e.forecast_note}")
    if e.safety:
        s = e.safety
        lines.append(
            f"  thermal      MTSR {from_kelvin(s['mtsr_k'], 'degC'):.1f} ± "
            f"{s['mtsr_sd_k']:.1f} K, dT_ad {s['delta_t_ad_k']:.1f} K, "
            f"class {s['criticality_class']} (advisory only)"
        )
    lines.extend(f"  warning      {w}" for w in e.warnings)
    return "\n".join(lines)
