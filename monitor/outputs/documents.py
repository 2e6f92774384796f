"""JSON documents other programs read: one mapping per kind of result."""

from __future__ import annotations

import json
import math
from datetime import datetime

from ..timefmt import iso


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
        "config_version": e.config_version,
        "model_contradicted": e.model_contradicted,
    }
    doc.update(e.safety)
    return doc


def estimate_record(e, *, golden: dict | None = None, computed_s: float | None = None) -> dict:
    """The flat record of an estimate (the store's row, the write-back's source).

    Times stay epoch seconds [s]; ``doc`` is the `estimate_json` document, so a
    reader of the store sees exactly what ``convmon estimate --json`` prints, plus,
    from the live monitor, ``golden``: how far the batch is from its recipe's golden
    band. ``computed_s``: when the estimate was computed (the poll cycle's clock).
    """
    doc = estimate_json(e)
    if golden is not None:
        doc["golden"] = golden
    return {
        "batch": e.batch,
        "at_s": e.at_s,
        "conversion": e.conversion,
        "conversion_sd": e.conversion_sd,
        "activity": e.activity,
        "activity_sd": e.activity_sd,
        "target_conversion": e.target_conversion,
        "predicted_end_s": e.predicted_end_s,
        "p10_s": e.predicted_end_p10_s,
        "p90_s": e.predicted_end_p90_s,
        "forecast_note": e.forecast_note,
        "n_assays_used": e.n_assays_used,
        "warnings": json.dumps(e.warnings),
        "kinetics_version": e.kinetics_version,
        "config_version": e.config_version,
        "computed_s": computed_s,
        "doc": json.dumps(_clean(doc), separators=(",", ":")),
    }
