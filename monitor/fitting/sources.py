"""Where a fit's data come from: a recipe's batches in the historian, or a lab CSV.

Both give `FitSeries` (SI: seconds, kelvin, mol/L) and typed warnings about what was
left out (`SourceWarning`); neither fits anything.
"""

from __future__ import annotations

import csv
from enum import StrEnum
from pathlib import Path

import numpy as np

from ..config import Config
from ..config.models import require_recipe
from ..errors import DataQualityError, UsageError
from ..historian.reader import HistorianReader
from ..physics.plant_fit import FitSeries, FitWarning
from ..units import to_kelvin
from .progress import FitProgress


class SourceWarning(StrEnum):
    """What loading the data noticed (stable names: they reach JSON)."""

    EVENT_PROBLEM = "event_problem"  # the batch-event table has a problem
    BATCH_LEFT_OUT = "batch_left_out"  # too few temperature samples or no assays
    EXCLUDED_SAMPLES = "excluded_samples"  # samples excluded by quality, per tag and reason


#: The lab CSV's time columns and their seconds per unit.
LAB_TIME_COLUMNS = {"time_s": 1.0, "time_min": 60.0, "time_h": 3600.0}
#: The lab CSV's temperature columns and their units.
LAB_TEMPERATURE_COLUMNS = {"T_K": "K", "T_degC": "degC", "T_degF": "degF"}
#: A lab run whose temperature varies more than this is not isothermal [K].
LAB_ISOTHERMAL_SPREAD_K = 0.5


def recipe_config(cfg: Config, recipe: str):
    """The recipe's ``[recipes.R]`` table; a configuration error names it when absent."""
    return require_recipe(cfg, recipe)


def select_batches(reader: HistorianReader, recipe: str, wanted: list[str] | None):
    """The complete batches of ``recipe`` (or the ``wanted`` ones), and event warnings."""
    found, problems = reader.batches(recipe=recipe)
    warnings = [
        FitWarning(SourceWarning.EVENT_PROBLEM, f"event problem: {p.message}") for p in problems
    ]
    if wanted:
        by_id = {b.batch: b for b in found}
        missing = [w for w in wanted if w not in by_id]
        if missing:
            raise UsageError(f"--batches: not batches of recipe {recipe}: {', '.join(missing)}")
        running = [w for w in wanted if by_id[w].end_s is None]
        if running:
            raise UsageError(
                f"--batches: still running (only complete batches are fitted): {', '.join(running)}"
            )
        return [by_id[w] for w in wanted], warnings
    chosen = [b for b in found if b.end_s is not None]
    if not chosen:
        raise DataQualityError(f"recipe {recipe}: no complete batches in the export")
    return chosen, warnings


def _excluded_warning(excluded: dict) -> FitWarning:
    return FitWarning(
        SourceWarning.EXCLUDED_SAMPLES,
        "excluded samples: " + ", ".join(f"{t} {r} ×{n}" for (t, r), n in sorted(excluded.items())),
        {"counts": [{"tag": t, "reason": r, "n": n} for (t, r), n in sorted(excluded.items())]},
    )


def load_series(
    cfg: Config,
    recipe: str,
    batches: list[str] | None = None,
    progress: FitProgress | None = None,
) -> tuple[list[FitSeries], list[FitWarning]]:
    """The recipe's complete batches (or ``batches``) as fit series, and load warnings."""
    rc = recipe_config(cfg, recipe)
    reader = HistorianReader(cfg)
    series, excluded = [], {}
    try:
        chosen, warnings = select_batches(reader, recipe, batches)
        for i, b in enumerate(chosen):
            data = reader.read_batch(b)
            if progress is not None:
                progress.loading(i + 1, len(chosen), b.batch)
            for row in data.quality.as_rows():
                key = (row["tag"], row["reason"])
                excluded[key] = excluded.get(key, 0) + row["count"]
            c_a0 = (
                data.charge
                if data.charge is not None and data.charge > 0
                else rc.initial_concentration
            )
            if c_a0 is None:
                raise DataQualityError(
                    f"batch {b.batch}: no charge sample and no "
                    f"recipes.{recipe}.initial_concentration"
                )
            if len(data.temperature) < 2 or not len(data.assays):
                warnings.append(
                    FitWarning(
                        SourceWarning.BATCH_LEFT_OUT,
                        f"{b.batch}: {len(data.temperature)} temperature samples and "
                        f"{len(data.assays)} assays; left out",
                        {"batch": b.batch},
                    )
                )
                continue
            series.append(
                FitSeries(
                    b.batch,
                    data.temperature.t_s,
                    data.temperature.value,
                    float(c_a0),
                    data.assays.t_s,
                    data.assays.value,
                    rc.assay_kind,
                    rc.assay_sd,
                    start_s=b.start_s,
                )
            )
    finally:
        reader.close()
    if excluded:
        warnings.append(_excluded_warning(excluded))
    return series, warnings


def _lab_rows(p: Path) -> tuple[list[dict], str, str]:
    """The CSV's data rows and its time and temperature column names."""
    try:
        lines = [
            ln
            for ln in p.read_text(encoding="utf-8").splitlines()
            if ln.strip() and not ln.lstrip().startswith("#")
        ]
    except FileNotFoundError:
        raise UsageError(f"{p}: lab CSV not found") from None
    rows = list(csv.DictReader(lines))
    if not rows:
        raise UsageError(f"{p}: no data rows")
    cols = set(rows[0])
    tcol = next((c for c in LAB_TIME_COLUMNS if c in cols), None)
    Tcol = next((c for c in LAB_TEMPERATURE_COLUMNS if c in cols), None)
    if tcol is None or Tcol is None or "c_a" not in cols:
        raise UsageError(
            f"{p}: expected columns time_s|time_min|time_h, T_K|T_degC|T_degF and "
            f"c_a; found {', '.join(sorted(cols))}"
        )
    return rows, tcol, Tcol


def _lab_run(p: Path, key: str, g: list) -> FitSeries:
    """One isothermal run (rows of ``(t, T, c, sd, c0)``) as a fit series."""
    a = np.array([(t, T, c) for t, T, c, _, _ in g])
    order = np.argsort(a[:, 0], kind="stable")
    a = a[order]
    sds = np.array([g[j][3] if g[j][3] is not None else 1.0 for j in order])
    c0 = next((v[4] for v in g if v[4] is not None), None)
    assays = np.ones(len(a), bool)
    if c0 is None:
        at0 = a[:, 0] == 0
        if not at0.any():
            raise UsageError(f"{p}: run {key}: no row at time 0 and no c_a0 column")
        c0 = float(np.mean(a[at0, 2]))
        assays = ~at0
    T_run = float(np.mean(a[:, 1]))
    if np.ptp(a[:, 1]) > LAB_ISOTHERMAL_SPREAD_K:
        raise UsageError(
            f"{p}: run {key}: temperature varies by {np.ptp(a[:, 1]):.1f} K; "
            "a lab run must be isothermal (give each temperature its own run)"
        )
    t_end = max(float(a[:, 0].max()), 1.0)
    return FitSeries(
        key,
        np.array([0.0, t_end]),
        np.array([T_run, T_run]),
        c0,
        a[assays, 0],
        a[assays, 2],
        "concentration",
        sds[assays],
        start_s=0.0,
    )


def read_lab_csv(path: str | Path) -> tuple[list[FitSeries], bool]:
    """Isothermal runs from a CSV: one series per ``run`` (or per temperature).

    Columns: one of ``time_s``/``time_min``/``time_h``; one of ``T_K``/``T_degC``/
    ``T_degF``; ``c_a`` [mol/L]; optional ``run``, ``sd`` [mol/L] and ``c_a0``
    [mol/L]. Without ``c_a0`` each run needs a row at time 0, which then defines
    ``C_A0`` and is not a residual. Lines starting with ``#`` are comments.
    Returns the series and whether the CSV states assay errors (an ``sd`` column;
    without it the fit is unweighted and the errors come from the scatter).
    """
    p = Path(path)
    rows, tcol, Tcol = _lab_rows(p)
    groups: dict[str, list] = {}
    for i, r in enumerate(rows, start=2):
        try:
            t = float(r[tcol]) * LAB_TIME_COLUMNS[tcol]
            T = float(to_kelvin(float(r[Tcol]), LAB_TEMPERATURE_COLUMNS[Tcol]))
            c = float(r["c_a"])
            sd = float(r["sd"]) if r.get("sd") not in (None, "") else None
            c0 = float(r["c_a0"]) if r.get("c_a0") not in (None, "") else None
        except (TypeError, ValueError):
            raise UsageError(f"{p}: data row {i - 1}: expected numbers, got {r}") from None
        key = r.get("run") or f"{T:.2f} K"
        groups.setdefault(key, []).append((t, T, c, sd, c0))
    series = [_lab_run(p, key, g) for key, g in groups.items()]
    return series, "sd" in rows[0]


__all__ = [
    "SourceWarning",
    "load_series",
    "read_lab_csv",
    "recipe_config",
    "select_batches",
]
