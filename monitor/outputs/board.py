"""The operators' status view (terminal table)."""

from __future__ import annotations

from datetime import datetime

from rich.table import Table

from ..units import from_kelvin
from .formats import local

CAUTION = "advisory only - not a control or safety system"


def _t(iso: str | None, zone: str) -> str:
    return "-" if iso is None else local(datetime.fromisoformat(iso).timestamp(), zone)


def status_table(doc: dict, zone: str, now_s: float | None = None) -> Table:
    beat = doc.get("heartbeat") or {}
    title = f"running batches - last good cycle {_t(beat.get('last_good_cycle'), zone)}"
    table = Table(title=title, caption=CAUTION)
    for col in (
        "unit",
        "batch",
        "recipe",
        "elapsed",
        "conversion",
        "T",
        "P50 end (local)",
        "P10 - P90",
        "alerts",
        "data age",
    ):
        table.add_column(col)
    for r in doc.get("status", []):
        at = datetime.fromisoformat(r["at"]).timestamp()
        start = datetime.fromisoformat(r["start"]).timestamp()
        ref = now_s if now_s is not None else at
        band = "-"
        if r.get("predicted_end_p10") and r.get("predicted_end_p90"):
            band = (
                f"{_t(r['predicted_end_p10'], zone)[11:16]} - "
                f"{_t(r['predicted_end_p90'], zone)[11:16]}"
            )
        temp = r.get("temperature_k")
        table.add_row(
            r["unit"],
            r["batch"],
            r["recipe"],
            f"{(at - start) / 3600:.1f} h",
            f"{r['conversion']:.3f} ± {r['conversion_sd']:.3f}",
            "-" if temp is None else f"{from_kelvin(temp, 'degC'):.1f} °C",
            _t(r.get("predicted_end"), zone)
            if r.get("predicted_end")
            else (r.get("forecast_note") or "-")[:40],
            band,
            ", ".join(r.get("alerts", [])) or "-",
            f"{max(ref - at, 0) / 60:.0f} min",
        )
    return table
