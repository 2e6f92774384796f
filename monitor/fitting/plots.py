"""Pictures of a fit an engineer can defend: parity, residuals in time, Arrhenius.

Every point is identified: assays are coloured by their batch's effective
temperature (with a colour bar), assays left out are crossed and labelled with their
batch and time, and every axis carries its unit. The figures are built by functions
that return them (tests read their content); `write_plots` saves them as PNG beside
the kinetics file. Matplotlib's object API with the Agg canvas: no global state.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..batch.kinetics import k_ref_unit
from ..physics.plant_fit import PlantFit, ln_k_band

ZERO_C_K = 273.15
#: Colour map of the batch temperature: perceptually uniform, readable in greyscale.
CMAP = "viridis"
#: Up to this many Arrhenius points are each labelled with their batch; beyond, the
#: two highest and two lowest.
LABEL_ALL_POINTS = 12


#: What the plant fit's Arrhenius points are, and the footnote that reads them right.
PLANT_POINTS = "batch: fitted activity × k(T_eff)"
PLANT_NOTE = (
    "Each point is a batch's fitted rate constant at its effective (Θ-weighted harmonic mean) "
    "temperature. The fit uses every assay along its own temperature trace, ramps included, "
    "so Ea can be better determined than the spread of these points' temperatures suggests."
)


@dataclass(frozen=True)
class ArrheniusPoint:
    """One batch's (or run's) rate constant at its temperature, for the Arrhenius plot."""

    name: str
    T_K: float
    k: float  # [unit of k_ref]
    se_ln_k: float | None  # standard error of ln k [-]


def plot_paths(out: str | Path) -> dict[str, Path]:
    """Where the plots of kinetics file ``out`` go (beside it)."""
    p = Path(out)
    return {
        "parity": p.with_name(f"{p.stem}_parity.png"),
        "residuals": p.with_name(f"{p.stem}_residuals.png"),
        "arrhenius": p.with_name(f"{p.stem}_arrhenius.png"),
    }


def assay_label(assay_kind: str) -> tuple[str, str]:
    """The assay's symbol and unit: ``("C_A", "mol/L")`` or ``("X", "-")``."""
    return ("C_A", "mol/L") if assay_kind == "concentration" else ("X", "-")


def _law_text(fit: PlantFit) -> str:
    return fit.rate_law + (f" order {fit.order:.3g}" if fit.rate_law == "power" else "")


class _Assays:
    """All assays of a fit, flat, with their batch, time and batch temperature."""

    def __init__(self, fit: PlantFit):
        cat = np.concatenate
        rs = fit.residuals
        self.names = cat([[r["name"]] * len(r["t_s"]) for r in rs]).astype(str)
        self.obs = cat([r["observed"] for r in rs])
        self.pred = cat([r["predicted"] for r in rs])
        self.res = cat([r["residual"] for r in rs])
        self.sigma = cat([r["sigma"] for r in rs])
        self.t_h = cat([r["t_s"] for r in rs]) / 3600.0
        self.used = cat([r["used"] for r in rs]).astype(bool)
        temps = [fit.series_temperature_k.get(r["name"], math.nan) for r in rs]
        self.T_c = cat(
            [np.full(len(r["t_s"]), T - ZERO_C_K) for T, r in zip(temps, rs, strict=True)]
        )

    def draw(self, fig: Figure, ax, x, y) -> None:
        """Used assays coloured by batch temperature (colour bar); left out: labelled crosses."""
        u = self.used
        finite = np.isfinite(self.T_c)
        vmin, vmax = (
            (float(np.min(self.T_c[finite])), float(np.max(self.T_c[finite])))
            if finite.any()
            else (0.0, 1.0)
        )
        if vmax - vmin < 0.5:  # one hold temperature: a readable scale around it
            vmin, vmax = vmin - 0.5, vmax + 0.5
        sc = ax.scatter(
            x[u],
            y[u],
            c=self.T_c[u],
            cmap=CMAP,
            vmin=vmin,
            vmax=vmax,
            s=16,
            alpha=0.85,
            edgecolors="none",
            label="assay used in the fit",
        )
        bar = fig.colorbar(sc, ax=ax)
        bar.set_label("effective temperature of the batch (or run) [°C]")
        if (~u).any():
            ax.scatter(x[~u], y[~u], s=48, marker="x", color="red", label="left out (outlier)")
            for i in np.flatnonzero(~u):
                ax.annotate(
                    f"{self.names[i]} at {self.t_h[i]:.1f} h",
                    (x[i], y[i]),
                    xytext=(6, 4),
                    textcoords="offset points",
                    fontsize=8,
                    color="red",
                )
        ax.legend(loc="best", fontsize=8)


def parity_figure(fit: PlantFit, assay_kind: str = "concentration") -> Figure:
    """Observed against predicted assays, with the line of equality."""
    a = _Assays(fit)
    sym, unit = assay_label(assay_kind)
    fig = Figure(figsize=(6.8, 6.0), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    lo = float(min(a.obs.min(), a.pred.min()))
    hi = float(max(a.obs.max(), a.pred.max()))
    ax.plot([lo, hi], [lo, hi], color="black", lw=1, label="observed = predicted")
    a.draw(fig, ax, a.pred, a.obs)
    ax.set_xlabel(f"predicted {sym} [{unit}]")
    ax.set_ylabel(f"observed {sym} [{unit}]")
    ax.set_title(
        f"{_law_text(fit)}: {fit.n_assays} assays from {fit.n_series} batches, "
        f"RMSE {fit.rmse:.3g}" + (f" {unit}" if unit != "-" else f" (in {sym})"),
        fontsize=10,
    )
    fig.tight_layout()
    return fig


def residual_figure(
    fit: PlantFit, assay_kind: str = "concentration", sd_stated: bool = True
) -> Figure:
    """Residuals against time since batch start, with a ±2σ band.

    The band is twice the stated assay error (its median) when the assays state one,
    else twice the fit's RMSE (the scatter is then the only measure of the error).
    """
    a = _Assays(fit)
    sym, unit = assay_label(assay_kind)
    fig = Figure(figsize=(8.5, 4.8), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.axhline(0.0, color="black", lw=1)
    if sd_stated:
        with np.errstate(divide="ignore", invalid="ignore"):
            sd = np.abs(a.res / a.sigma)
        sd = sd[np.isfinite(sd) & (sd > 0)]
        two = 2.0 * float(np.median(sd)) if len(sd) else math.nan
        what = "±2σ stated assay error"
    else:
        two, what = 2.0 * fit.rmse, "±2 × RMSE (no stated assay error)"
    if math.isfinite(two) and two > 0:
        size = f"{two:.3g}" + (f" {unit}" if unit != "-" else "")
        ax.axhspan(-two, two, color="0.9", zorder=0, label=f"{what} ({size})")
    a.draw(fig, ax, a.t_h, a.res)
    ax.set_xlabel("time since batch start [h]")
    ax.set_ylabel(f"observed − predicted {sym} [{unit}]")
    ax.set_title(f"{_law_text(fit)}: residuals against time", fontsize=10)
    fig.tight_layout()
    return fig


def plant_arrhenius_points(fit: PlantFit) -> list[ArrheniusPoint]:
    """Each batch's fitted rate constant ``activity × k(T_eff)`` at its effective temperature."""
    if fit.ea_j_per_mol is None:
        return []
    out = []
    for name, T in fit.series_temperature_k.items():
        if not math.isfinite(T):
            continue
        k_T = math.exp(float(ln_k_band(fit, [T])[0][0]))
        out.append(
            ArrheniusPoint(
                name, T, fit.activity.get(name, 1.0) * k_T, fit.activity_stderr.get(name)
            )
        )
    return out


def _labelled(fit: PlantFit, points: list[ArrheniusPoint]) -> list[ArrheniusPoint]:
    """The points to label: all of few, else the two farthest above and below the line."""
    if len(points) <= LABEL_ALL_POINTS:
        return points
    line = ln_k_band(fit, [p.T_K for p in points])[0]
    off = np.log([p.k for p in points]) - line
    ranked = [points[i] for i in np.argsort(off)]
    return ranked[:2] + ranked[-2:]


def arrhenius_figure(
    fit: PlantFit, points: list[ArrheniusPoint], what: str, note: str = ""
) -> Figure:
    """ln k against 1000/T: the fitted line, its 95 % confidence band, and the points.

    ``what`` says what the points are (for the legend), ``note`` is a footnote.
    """
    unit = k_ref_unit(fit.rate_law, fit.order)
    T_pts = np.array([p.T_K for p in points])
    span = max(float(np.ptp(T_pts)) if len(points) else 0.0, 5.0)
    T = np.linspace(T_pts.min() - 0.1 * span, T_pts.max() + 0.1 * span, 200)
    ln_k, half = ln_k_band(fit, T)
    fig = Figure(figsize=(7.5, 5.2), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    x = 1000.0 / T
    ax.plot(x, ln_k, color="black", lw=1.2, label="fitted Arrhenius line")
    if np.isfinite(half).all():
        ax.fill_between(x, ln_k - half, ln_k + half, color="0.8", label="95 % confidence band")
    err = np.array([p.se_ln_k if p.se_ln_k is not None else 0.0 for p in points])
    ax.errorbar(
        1000.0 / T_pts,
        np.log([p.k for p in points]),
        yerr=err,
        fmt="o",
        ms=4,
        color="tab:blue",
        ecolor="0.5",
        capsize=2,
        label=f"{what} (bars ±1 s.e.)",
    )
    for p in _labelled(fit, points):
        ax.annotate(
            p.name,
            (1000.0 / p.T_K, math.log(p.k)),
            xytext=(4, 3),
            textcoords="offset points",
            fontsize=7,
        )
    ax.set_xlabel("1000 / T [1/K]")
    ax.set_ylabel(f"ln(k / [{unit}])")
    top = ax.secondary_xaxis(
        "top", functions=(lambda v: 1000.0 / v - ZERO_C_K, lambda c: 1000.0 / (c + ZERO_C_K))
    )
    top.set_xlabel("T [°C]")
    se_ea = fit.stderr.get("ea_j_per_mol")
    ea_text = f"Ea {fit.ea_j_per_mol / 1e3:.1f}" + (
        "" if se_ea is None else f" ± {se_ea / 1e3:.1f}"
    )
    ax.set_title(
        f"{_law_text(fit)}: {ea_text} kJ/mol, k_ref {fit.k_ref:.3g} {unit} at {fit.t_ref_k:.2f} K",
        fontsize=10,
    )
    ax.legend(loc="best", fontsize=8)
    if note:
        fig.text(0.01, 0.01, note, fontsize=7, color="0.3", wrap=True)
        fig.tight_layout(rect=(0, 0.06, 1, 1))
    else:
        fig.tight_layout()
    return fig


def write_plots(
    fit: PlantFit,
    out: str | Path,
    *,
    assay_kind: str = "concentration",
    sd_stated: bool = True,
    arrhenius: list[ArrheniusPoint] | None = None,
    arrhenius_what: str = PLANT_POINTS,
    arrhenius_note: str = "",
) -> dict[str, Path]:
    """Parity and residual plots beside ``out`` (PNG); the Arrhenius plot when points are given.

    Returns the paths written, by name.
    """
    paths = plot_paths(out)
    written = {}
    figures = {
        "parity": parity_figure(fit, assay_kind),
        "residuals": residual_figure(fit, assay_kind, sd_stated),
    }
    if arrhenius and len({round(p.T_K, 1) for p in arrhenius}) >= 2:
        figures["arrhenius"] = arrhenius_figure(fit, arrhenius, arrhenius_what, arrhenius_note)
    for name, fig in figures.items():
        fig.savefig(paths[name])
        written[name] = paths[name]
    return written


__all__ = [
    "PLANT_NOTE",
    "PLANT_POINTS",
    "ArrheniusPoint",
    "arrhenius_figure",
    "assay_label",
    "parity_figure",
    "plant_arrhenius_points",
    "plot_paths",
    "residual_figure",
    "write_plots",
]
