"""The golden profile as a chart (PNG, SVG or PDF by suffix), readable in greyscale.

Six panels: conversion against time since start; time to reach X against X;
temperature against time since start (each with the golden batches drawn
faintly, the band of good batches shaded, the median solid and the alert
limit dashed); the activities and the times to target of the golden batches
with their limits; and the leave-one-batch-out calibration (share of golden
batches that would have raised each alert, with its 95 % interval, against the
target rate). The footer carries the caution.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..batch.golden_profile import GoldenProfile
from ..timefmt import iso
from ..units import from_kelvin

CAUTION = (
    "Advisory only: not a safety or control system. Bands describe past batches; "
    "defer to the site's process-safety reviews, local codes and licensed practice."
)
_SYMBOL = {"degC": "°C", "degF": "°F", "K": "K"}
_RULE_LABELS = {
    "behind_profile": "behind profile",
    "late_finish": "late finish",
    "temperature_off_profile": "temperature off profile",
    "low_activity": "low activity",
    "all": "any rule",
}


def _band(ax, x, med, lo, hi, limits, label_limit):
    ax.fill_between(x, lo, hi, color="0.85", lw=0, label="good batches (5-95 %)", zorder=0)
    ax.plot(x, med, color="black", lw=1.6, label="median")
    for i, lim in enumerate(limits):
        ax.plot(x, lim, color="black", lw=1.2, ls="--", label=label_limit if i == 0 else None)


def golden_chart(profile: GoldenProfile, out: str | Path, *, unit: str = "degC") -> Path:
    """Draw the profile to ``out`` (format from the suffix); returns the path."""
    out = Path(out)
    fig = Figure(figsize=(13.0, 8.2), dpi=110)
    FigureCanvasAgg(fig)
    axs = fig.subplots(2, 3, gridspec_kw={"height_ratios": [3, 2]})
    b, tl = profile.behind, profile.temperature
    t_h = np.arange(len(b.x_median)) * b.step_s / 3600.0
    t_max = 1.15 * max(profile.times_to_target_s.values(), default=t_h[-1] * 3600.0) / 3600.0
    ax = axs[0, 0]
    for tr in profile.trajectories.values():
        x = np.asarray(tr["x"], float)
        ax.plot(np.arange(len(x)) * b.step_s / 3600.0, x, color="0.45", lw=0.4, zorder=1)
    _band(ax, t_h, b.x_median, b.x_band_lo, b.x_band_hi, [b.x_limit], "behind below")
    ax.set(xlabel="time since start [h]", ylabel="conversion X [-]", ylim=(0, 1.02))
    ax.set_xlim(0, t_max)
    ax.set_title("conversion against time", fontsize=10)
    ax.legend(fontsize=7, loc="lower right")

    ax = axs[0, 1]
    tm = b.t_median / 3600.0
    _band(ax, b.x_levels, tm, tm, b.t_band_hi / 3600.0, [tm + b.lag_limit_s / 3600.0], "")
    ax.lines[-1].set_label("behind beyond")
    ax.collections[0].set_label("good batches (median-95 %)")
    ax.set(xlabel="conversion X [-]", ylabel="time to reach X [h]")
    ax.set_title("time to reach X (conversion as maturity)", fontsize=10)
    ax.legend(fontsize=7, loc="upper left")

    ax = axs[0, 2]
    sym = _SYMBOL.get(unit, unit)
    t_t = np.arange(len(tl.median)) * tl.step_s / 3600.0
    for tr in profile.trajectories.values():
        T = np.asarray([np.nan if v is None else v for v in tr["t_k"]], float)
        ax.plot(
            np.arange(len(T)) * tl.step_s / 3600.0,
            from_kelvin(T, unit),
            color="0.45",
            lw=0.4,
            zorder=1,
        )
    conv = [from_kelvin(a, unit) for a in (tl.median, tl.band_lo, tl.band_hi)]
    lims = [from_kelvin(tl.limit_lo, unit), from_kelvin(tl.limit_hi, unit)]
    _band(ax, t_t, *conv, lims, "off profile outside")
    ax.set(xlabel="time since start [h]", ylabel=f"temperature [{sym}]")
    ax.set_xlim(0, t_max)
    ax.set_title("temperature against time", fontsize=10)
    ax.legend(fontsize=7, loc="lower right")

    ax = axs[1, 0]
    act = np.array(sorted(profile.activities.values()))
    ax.plot(act, np.zeros_like(act), "o", mfc="white", mec="black", ms=6)
    ax.set_ylim(-1, 1)
    ax.axvline(profile.activity.median, color="black", lw=1.6, label="median")
    ax.axvline(profile.activity.limit, color="black", ls="--", lw=1.2, label="low below")
    ax.set(xlabel="activity of golden batches [-]", yticks=[])
    ax.set_title("activity", fontsize=10)
    ax.legend(fontsize=7)

    ax = axs[1, 1]
    ttt = np.array(sorted(profile.times_to_target_s.values())) / 3600.0
    ax.plot(ttt, np.zeros_like(ttt), "s", mfc="white", mec="black", ms=6)
    ax.set_ylim(-1, 1)
    ax.axvline(profile.finish.median_s / 3600.0, color="black", lw=1.6, label="median")
    ax.axvline(profile.finish.limit_s / 3600.0, color="black", ls="--", lw=1.2, label="late after")
    ax.set(xlabel="time to target of golden batches [h]", yticks=[])
    ax.set_title("time to target", fontsize=10)
    ax.legend(fontsize=7)

    ax = axs[1, 2]
    cal = profile.calibration
    keys = [k for k in (*_RULE_LABELS,) if k in cal]
    rates = [cal[k]["rate"] for k in keys]
    lo = [cal[k]["rate"] - cal[k]["ci"][0] for k in keys]
    hi = [cal[k]["ci"][1] - cal[k]["rate"] for k in keys]
    y = np.arange(len(keys))
    ax.barh(y, rates, color="0.7", edgecolor="black", xerr=[lo, hi], capsize=3)
    ax.axvline(cal.get("target_rate", 0.05), color="black", ls=":", lw=1.2, label="target rate")
    ax.set_yticks(y, [f"{_RULE_LABELS[k]} ({cal[k]['n_flagged']}/{cal[k]['n']})" for k in keys])
    ax.invert_yaxis()
    top = max([cal[k]["ci"][1] for k in keys] + [cal.get("target_rate", 0.05)])
    ax.set(xlabel="share of golden batches with an alert [-]", xlim=(0, min(1.0, 1.15 * top)))
    ax.set_title("calibration, leave-one-batch-out (95 % CI)", fontsize=10)
    ax.legend(fontsize=7, loc="lower right")
    ax.tick_params(axis="y", labelsize=7)

    fig.suptitle(
        f"golden profile {profile.recipe} v{profile.version}: {len(profile.batches)} batches, "
        f"kinetics {profile.kinetics_version or '-'}, built {iso(profile.created_at_s)}",
        fontsize=11,
    )
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=8, style="italic")
    fig.tight_layout(rect=(0, 0.03, 1, 0.96))
    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out)
    return out
