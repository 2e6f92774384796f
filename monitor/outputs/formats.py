"""JSON documents and short human summaries (units converted for people here only)."""

from __future__ import annotations

import json
import math
from datetime import datetime
from zoneinfo import ZoneInfo

from ..historian.model import to_datetime
from ..units import from_kelvin


def iso(t_s: float | None) -> str | None:
    """ISO-8601 in UTC with offset, or None."""
    return None if t_s is None else to_datetime(t_s).isoformat(timespec="seconds")


def local(t_s: float | None, zone: str) -> str:
    if t_s is None:
        return "-"
    return to_datetime(t_s).astimezone(ZoneInfo(zone)).strftime("%Y-%m-%d %H:%M %Z")


def _clean(x):
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [_clean(v) for v in x]
    if isinstance(x, datetime):
        return x.isoformat(timespec="seconds")
    if hasattr(x, "item") and not isinstance(x, str):  # numpy scalars
        return _clean(x.item())
    return x


def dumps(doc) -> str:
    """Exactly one JSON document (NaN/inf become null)."""
    return json.dumps(_clean(doc), indent=2, sort_keys=False)


def batch_json(b, counts: tuple[int, int]) -> dict:
    return {
        "batch": b.batch,
        "unit": b.unit,
        "recipe": b.recipe,
        "start": iso(b.start_s),
        "end": iso(b.end_s),
        "state": b.state,
        "n_temperature": counts[0],
        "n_assays": counts[1],
    }


def estimate_json(e) -> dict:
    doc = {
        "batch": e.batch,
        "unit": e.unit,
        "recipe": e.recipe,
        "at": iso(e.at_s),
        "start": iso(e.start_s),
        "conversion": e.conversion,
        "conversion_sd": e.conversion_sd,
        "activity": e.activity,
        "activity_sd": e.activity_sd,
        "target_conversion": e.target_conversion,
        "predicted_end": iso(e.predicted_end_s),
        "predicted_end_p10": iso(e.predicted_end_p10_s),
        "predicted_end_p90": iso(e.predicted_end_p90_s),
        "forecast_note": e.forecast_note,
        "n_assays_used": e.n_assays_used,
        "warnings": list(e.warnings),
        "temperature_k": e.temperature_k,
        "kinetics_version": e.kinetics_version,
    }
    doc.update(e.safety)
    return doc


def estimate_text(e, zone: str) -> str:
    """A short summary an operator can read at a glance."""
    lines = [
        f"batch {e.batch} on {e.unit} ({e.recipe}), at {local(e.at_s, zone)} [{iso(e.at_s)}]",
        f"  conversion   {e.conversion:.3f} ± {e.conversion_sd:.3f}"
        f"   (target {e.target_conversion:g}; activity {e.activity:.3f} ± "
        f"{e.activity_sd:.3f}; {e.n_assays_used} assay(s) used)",
    ]
    if e.temperature_k is not None:
        lines.append(f"  temperature  {from_kelvin(e.temperature_k, 'degC'):.1f} degC")
    if e.predicted_end_s is not None:
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
