"""The operators' status view (terminal table)."""

from __future__ import annotations

from datetime import datetime
from zoneinfo import ZoneInfo

from rich.table import Table

from ..units import from_kelvin
from .formats import local

CAUTION = "advisory only - not a control or safety system"


def _ts(iso: str | None) -> float | None:
    return None if iso is None else datetime.fromisoformat(iso).timestamp()


def _clock(iso: str | None, zone: str) -> str:
    """A short local time: weekday and hh:mm."""
    if iso is None:
        return "-"
    return datetime.fromisoformat(iso).astimezone(ZoneInfo(zone)).strftime("%a %H:%M")


def status_table(doc: dict, zone: str, now_s: float | None = None) -> Table:
    beat = doc.get("heartbeat") or {}
    last = _ts(beat.get("last_good_cycle"))
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
        ("alerts", "left"),
        ("data age", "right"),
    ):
        table.add_column(col, justify=justify)
    for r in doc.get("status", []):
        at, start = _ts(r["at"]), _ts(r["start"])
        ref = now_s if now_s is not None else at
        band = "-"
        if r.get("predicted_end_p10") and r.get("predicted_end_p90"):
            band = (
                f"{_clock(r['predicted_end_p10'], zone)[4:]} - "
                f"{_clock(r['predicted_end_p90'], zone)[4:]}"
            )
        p50 = (
            _clock(r["predicted_end"], zone)
            if r.get("predicted_end")
            else (r.get("forecast_note") or "-")[:30]
        )
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
            ", ".join(r.get("alerts", [])) or "-",
            _age(max(ref - at, 0.0)),
        )
    return table


def _age(seconds: float) -> str:
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    if seconds < 172_800:
        return f"{seconds / 3600:.0f} h"
    return f"{seconds / 86_400:.0f} d"


def console(stream=None):
    """A rich console; off a terminal it is 120 columns wide so the table stays readable."""
    import sys

    from rich.console import Console

    stream = stream or sys.stdout
    return Console(file=stream, width=None if stream.isatty() else 120)
