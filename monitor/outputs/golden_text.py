"""The golden profile for programs (one JSON document) and for people (plain text)."""

from __future__ import annotations

import math

import numpy as np

from ..batch.golden_profile import GoldenProfile
from ..timefmt import duration, iso, local
from ..units import from_kelvin

CAUTION = (
    "advisory only: not a safety or control system; defer to the site's process-safety "
    "reviews, local codes and licensed practice"
)
_LABELS = {
    "behind_profile": "behind profile",
    "late_finish": "late finish",
    "temperature_off_profile": "temperature off profile",
    "low_activity": "low activity",
}
_HYSTERESIS_UNIT = {
    "behind_profile": "s of lag",
    "late_finish": "s",
    "temperature_off_profile": "K",
    "low_activity": "activity",
}


def _nums(a, digits: int = 6) -> list:
    return [round(float(v), digits) if math.isfinite(v) else None for v in np.asarray(a)]


def _persistence(level) -> str:
    p = level.persistence
    parts = []
    if p.min_duration_s:
        parts.append(duration(p.min_duration_s))
    if p.min_count > 1:
        parts.append(f"{p.min_count} assays in a row")
    return " and ".join(parts) or "at once"


def golden_json(profile: GoldenProfile, *, stored: bool, chart: str | None = None) -> dict:
    """The ``golden`` document: provenance, limits, calibration, selection and bands."""
    b, tl = profile.behind, profile.temperature
    return {
        "recipe": profile.recipe,
        "version": profile.version,
        "stored": stored,
        "created_at": iso(profile.created_at_s),
        "kinetics_version": profile.kinetics_version,
        "n_batches": len(profile.batches),
        "batches": list(profile.batches),
        "rules": {
            k: {
                "quantile": v.p,
                "fence_iqr": v.fence,
                "persistence_s": v.persistence.min_duration_s,
                "persistence_count": v.persistence.min_count,
                "hysteresis": v.hysteresis,
                "hysteresis_unit": _HYSTERESIS_UNIT[k],
            }
            for k, v in profile.rules.items()
        },
        "activity": {
            "median": profile.activity.median,
            "band_low": profile.activity.band_lo,
            "limit": profile.activity.limit,
            "z": profile.activity.z,
            "by_batch": profile.activities,
        },
        "time_to_target_s": {
            "median": profile.finish.median_s,
            "band_high": profile.finish.band_hi_s,
            "limit": profile.finish.limit_s,
            "by_batch": profile.times_to_target_s,
        },
        "calibration": profile.calibration,
        "selection": profile.selection,
        "settings": profile.settings,
        "bands": {
            "step_s": b.step_s,
            "conversion": {
                "median": _nums(b.x_median),
                "low": _nums(b.x_band_lo),
                "high": _nums(b.x_band_hi),
                "limit": _nums(b.x_limit),
            },
            "time_to_x_s": {
                "x": _nums(b.x_levels),
                "median": _nums(b.t_median),
                "high": _nums(b.t_band_hi),
                "lag_limit": _nums(b.lag_limit_s),
            },
            "temperature_k": {
                "median": _nums(tl.median),
                "low": _nums(tl.band_lo),
                "high": _nums(tl.band_hi),
                "limit_low": _nums(tl.limit_lo),
                "limit_high": _nums(tl.limit_hi),
            },
        },
        "chart": chart,
        "caution": CAUTION,
    }


def golden_lines(
    profile: GoldenProfile, zone: str, *, stored: bool, unit: str = "degC"
) -> list[str]:
    """The profile for people, in plant units and plant time."""
    f, a, tl = profile.finish, profile.activity, profile.temperature
    head = (
        f"golden profile {profile.recipe} v{profile.version}"
        if stored
        else f"golden profile {profile.recipe} (built now from history, not stored)"
    )
    hold = from_kelvin(float(tl.median[-1]), unit)
    lines = [
        f"{head}: {len(profile.batches)} batches, built {local(profile.created_at_s, zone)}, "
        f"kinetics {profile.kinetics_version or '-'}",
        f"  time to target: median {duration(f.median_s)}, good batches up to "
        f"{duration(f.band_hi_s)}; late after {duration(f.limit_s)}",
        f"  activity: median {a.median:.3f}, good batches from {a.band_lo:.3f}; low below "
        f"{a.limit:.3f} (mean + {a.z:g} sd)",
        f"  temperature at the end of the band: {hold:.1f} {unit}; limits "
        f"{from_kelvin(float(tl.limit_lo[-1]), unit):.1f} to "
        f"{from_kelvin(float(tl.limit_hi[-1]), unit):.1f} {unit}",
        "  rule                     limit from the band               persistence        "
        "golden batches alerted (leave-one-batch-out)",
    ]
    cal = profile.calibration
    for k, lv in profile.rules.items():
        c = cal.get(k, {})
        where = "extreme good batch" if lv.p == 0 else f"{lv.p:.1%} quantile"
        if lv.fence:
            where += f" + {lv.fence:g} IQR"
        widen = ""
        lines.append(
            f"  {_LABELS[k]:24s} {where + widen:33s} {_persistence(lv):18s} "
            f"{_rate(c)}" + ("" if c.get("feasible", True) else "  (target not met)")
        )
    if "all" in cal:
        lines.append(
            f"  {'any rule':24s} {'':33s} {'':18s} {_rate(cal['all'])} "
            f"(target {cal.get('target_rate', 0.05):.0%})"
        )
    left = profile.selection.get("left_out", {})
    if left:
        lines.append(f"  left out: {len(left)} batch(es)")
        by_reason: dict = {}
        for name, reasons in sorted(left.items()):
            by_reason.setdefault("; ".join(reasons), []).append(name)
        for reason, names in by_reason.items():
            lines.append(f"    {reason}: {', '.join(names)}")
    lines.append(f"  ({CAUTION})")
    return lines


def _rate(c: dict) -> str:
    if not c:
        return "-"
    lo, hi = c["ci"]
    return f"{c['n_flagged']}/{c['n']} ({c['rate']:.1%}; 95 % CI {lo:.1%}-{hi:.1%})"
