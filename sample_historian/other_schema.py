"""A second invented export in another layout, to show convmon reads a site by configuration.

Usage::

    python -m sample_historian.other_schema [--out sample_historian/other_schema.db] [--seed N]

Two reactors of an invented site ("Marrow Creek") run DIM-7 and CPL-3 for two
days around each 2026 DST change of America/Chicago (the spring-forward of
8 March and the fall-back of 1 November), with batches running through both.
What sets the export apart from the sample plant:

- tables ``hist_values(rec_no, point_name, sample_time, reading, status)`` and
  ``unit_procedures(proc_id, reactor, product, action, logged_at)``, actions
  ``BEGIN`` / ``COMPLETE``, and no insertion number on the procedures;
- readings in °F; naive local wall-clock text (``2026-11-01 01:30:00``) in
  America/Chicago, so the hour after 01:00 on 1 November appears twice;
- string status codes ``GOOD`` / ``BAD`` / ``SUSPECT``;
- lab assays written 45 min after they were sampled (a high ``rec_no`` for an
  old ``sample_time``).

Planted for the reader to catch (counted in the truth): BAD and SUSPECT rows,
the ``-999`` "no reading" sentinel with GOOD status, empty readings, rows a
collector sent twice, and one clock error per reactor stamped inside the hour
skipped at the spring-forward. Lab samples and procedure events are kept out
of the repeated hour: a lone row there cannot be placed by insertion order.

The same seed gives the same rows. Kinetic constants are read from
``config/kinetics/dim7.toml`` and ``cpl3.toml``; the truth (returned, and
written beside the database as ``*_truth.json``) holds the true UTC instants.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sqlite3
import sys
import tomllib
from datetime import datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np

ZONE = "America/Chicago"
DEFAULT_SEED = 20261101
DEFAULT_OUT = Path(__file__).resolve().parent / "other_schema.db"
KINETICS = Path(__file__).resolve().parents[1] / "config" / "kinetics"
R_GAS = 8.314462618  # [J/(mol*K)], CODATA 2018
STEP_S = 120.0  # transmitter scan period [s]
LAB_DELAY_S = 45 * 60.0  # sample to entry [s]
SENTINEL_F = -999.0
TRUTH_FORMAT = "convmon-other-schema-truth/1"

_SCHEMA = (
    "CREATE TABLE hist_values (rec_no INTEGER PRIMARY KEY, point_name TEXT NOT NULL, "
    "sample_time TEXT NOT NULL, reading REAL, status TEXT NOT NULL)",
    "CREATE INDEX ix_hist_values_point_time ON hist_values (point_name, sample_time)",
    "CREATE TABLE unit_procedures (proc_id TEXT NOT NULL, reactor TEXT NOT NULL, "
    "product TEXT NOT NULL, action TEXT NOT NULL, logged_at TEXT NOT NULL)",
)

# reactor, temperature point, assay point, charge point, product, plan [(min, degF)], length
REACTORS = {
    "RX-1": (
        "RX1.TEMP",
        "RX1.LAB_CA",
        "RX1.CHARGE_CA",
        "DIM-7",
        [(0, 86.0), (50, 158.0), (240, 158.0), (270, 168.8)],
        330,
    ),
    "RX-2": (
        "RX2.TEMP",
        "RX2.LAB_CONV",
        None,
        "CPL-3",
        [(0, 77.0), (40, 131.0), (180, 131.0), (200, 143.6)],
        270,
    ),
}
ASSAY_MIN = {"DIM-7": (60, 120, 180, 240, 300), "CPL-3": (45, 90, 135, 180, 240)}
INITIAL_CONCENTRATION = {"DIM-7": 1.60, "CPL-3": 1.25}  # [mol/L]
AMBIENT_F = 68.0
# local wall-clock starts (y, m, d, h, min) per campaign; None as end: still running
CAMPAIGNS = {
    "spring": (
        (2026, 3, 7),
        {
            "RX-1": [(3, 7, 6, 0), (3, 7, 14, 0), (3, 7, 22, 30), (3, 8, 9, 0), (3, 8, 16, 0)],
            "RX-2": [(3, 7, 7, 0), (3, 7, 15, 0), (3, 8, 0, 0), (3, 8, 10, 0)],
        },
    ),
    "fall": (
        (2026, 10, 31),
        {
            "RX-1": [
                (10, 31, 6, 0),
                (10, 31, 14, 0),
                (10, 31, 22, 30),
                (11, 1, 9, 0),
                (11, 1, 20, 0),
            ],
            "RX-2": [(10, 31, 7, 0), (10, 31, 15, 0), (11, 1, 0, 0), (11, 1, 10, 0)],
        },
    ),
}
RUNNING = {"RX1-1101-20"}  # the last batch: no COMPLETE before the export ends
# planted faults per reactor and campaign
N_BAD, N_SUSPECT, N_SENTINEL, N_EMPTY, N_RESENT = 5, 4, 2, 2, 3


def _local_text(t_s: float, tz: ZoneInfo) -> str:
    return datetime.fromtimestamp(t_s, tz=tz).strftime("%Y-%m-%d %H:%M:%S")


def _ambiguous(t_s: float, tz: ZoneInfo) -> bool:
    """True when the wall clock shows this instant's reading twice (a repeated hour)."""
    local = datetime.fromtimestamp(t_s, tz=tz).replace(tzinfo=None)
    return (
        local.replace(tzinfo=tz, fold=0).utcoffset() != local.replace(tzinfo=tz, fold=1).utcoffset()
    )


def _kinetics(recipe: str) -> dict:
    name = {"DIM-7": "dim7.toml", "CPL-3": "cpl3.toml"}[recipe]
    return tomllib.loads((KINETICS / name).read_text(encoding="utf-8"))


def _plan_f(plan, minutes: np.ndarray) -> np.ndarray:
    m, v = zip(*plan, strict=True)
    return np.interp(minutes, m, v)


def _assay(recipe: str, kin: dict, theta_s: float, activity: float) -> float:
    """True assay after ``theta_s`` = integral of k(T)/k_ref dt [s] (closed forms)."""
    c0 = INITIAL_CONCENTRATION[recipe]
    kt = kin["k_ref"] * activity * theta_s
    if kin["rate_law"] == "power":  # -dC/dt = k C^n: C^(1-n) = C0^(1-n) + (n-1) k t
        n = kin["order"]
        return (c0 ** (1 - n) + (n - 1) * kt) ** (1 / (1 - n))
    # A + B, B charged at theta_b per A: ln((th - X)/(th (1 - X))) = (th - 1) C0 k t
    th = kin["theta_b"]
    e = math.exp((th - 1) * c0 * kt)
    return th * (e - 1) / (th * e - 1)


def generate_other(path: str | os.PathLike, seed: int = DEFAULT_SEED) -> dict:
    """Write the export to ``path`` (replaced) and return its truth."""
    tz = ZoneInfo(ZONE)
    rng = np.random.default_rng(seed)
    rows: list[tuple] = []  # (write time [s], order, point, t_s, text or None, reading, status)
    events: list[tuple] = []
    truth_batches, planted = [], {}
    samples: dict[str, list] = {}

    def note(point, reason, n=1):
        key = f"{point}|{reason}"
        planted[key] = planted.get(key, 0) + n

    for campaign, ((y, m, d), plan_by_reactor) in CAMPAIGNS.items():
        t_begin = datetime(y, m, d, tzinfo=tz).timestamp()
        t_end = t_begin + 48 * 3600.0  # real seconds: 47 h of wall clock in spring, 49 in fall
        grid = t_begin + STEP_S * np.arange(int((t_end - t_begin) / STEP_S))
        for reactor, starts in plan_by_reactor.items():
            temp_pt, assay_pt, charge_pt, recipe, plan, length_min = REACTORS[reactor]
            kin = _kinetics(recipe)
            temp_f = AMBIENT_F + rng.normal(0.0, 0.4, len(grid))
            k_rel = np.zeros(len(grid))
            for mo, da, hh, mi in starts:
                start = datetime(y, mo, da, hh, mi, tzinfo=tz).timestamp()
                end = start + 60.0 * length_min
                bid = f"{reactor.replace('-', '')}-{mo:02d}{da:02d}-{hh:02d}"
                running = bid in RUNNING
                inside = (grid >= start) & (grid <= end)
                minutes = (grid[inside] - start) / 60.0
                temp_f[inside] = _plan_f(plan, minutes) + rng.normal(0.0, 0.3, inside.sum())
                for t_ev, action in ((start, "BEGIN"), (None if running else end, "COMPLETE")):
                    if t_ev is None:
                        continue
                    assert not _ambiguous(t_ev, tz), f"{bid}: {action} in a repeated hour"
                    events.append((t_ev, bid, reactor, recipe, action, _local_text(t_ev, tz)))
                truth_batches.append(
                    {
                        "batch": bid,
                        "unit": reactor,
                        "recipe": recipe,
                        "start_s": start,
                        "end_s": None if running else end,
                    }
                )
                # the lab: concentration (DIM-7) or conversion (CPL-3) of A
                true_k = (_plan_f(plan, minutes) - 32.0) / 1.8 + 273.15
                k_rel[inside] = np.exp(
                    -kin["ea_j_per_mol"] / R_GAS * (1.0 / true_k - 1.0 / kin["t_ref_k"])
                )
                theta = np.concatenate(
                    [[0.0], np.cumsum(0.5 * (k_rel[inside][1:] + k_rel[inside][:-1]) * STEP_S)]
                )
                activity = float(np.exp(rng.normal(0.0, kin["activity_sd"])))
                sd = 0.02 if recipe == "DIM-7" else 0.01
                for a_min in ASSAY_MIN[recipe]:
                    t_a = start + 60.0 * a_min
                    if _ambiguous(t_a, tz) or t_a > min(end, t_end - LAB_DELAY_S):
                        continue  # a lab sample in a repeated hour: see the module docstring
                    th = float(np.interp(t_a, grid[inside], theta))
                    value = round(_assay(recipe, kin, th, activity) + rng.normal(0.0, sd), 4)
                    rows.append((t_a + LAB_DELAY_S, 2, assay_pt, t_a, None, value, "GOOD"))
                    samples.setdefault(assay_pt, []).append((t_a, value))
                if charge_pt:
                    c0 = round(INITIAL_CONCENTRATION[recipe] * (1 + rng.normal(0, 0.01)), 4)
                    rows.append((start + 600.0, 1, charge_pt, start, None, c0, "GOOD"))
                    samples.setdefault(charge_pt, []).append((start, c0))

            temp_f = np.round(temp_f, 2)
            status = np.full(len(grid), "GOOD", dtype=object)
            reading = temp_f.astype(object)
            n_faults = N_BAD + N_SUSPECT + N_SENTINEL + N_EMPTY + N_RESENT
            picked = rng.choice(np.arange(1, len(grid) - 1), size=n_faults, replace=False)
            bad, suspect, sentinel, empty, resent = np.split(
                picked, np.cumsum([N_BAD, N_SUSPECT, N_SENTINEL, N_EMPTY])
            )
            status[bad], status[suspect] = "BAD", "SUSPECT"
            reading[sentinel] = SENTINEL_F
            reading[empty] = None
            note(temp_pt, "bad_quality", N_BAD + N_SUSPECT)
            note(temp_pt, "outside_limits", N_SENTINEL)
            note(temp_pt, "not_finite", N_EMPTY)
            note(temp_pt, "duplicate", N_RESENT)
            faulted = set(np.concatenate([bad, suspect, sentinel, empty]).tolist())
            for i, t in enumerate(grid):
                rows.append((t, 0, temp_pt, t, None, reading[i], status[i]))
                if i in resent:  # the collector sends the row again ten seconds later
                    rows.append((t + 10.0, 0, temp_pt, t, None, reading[i], status[i]))
                if i not in faulted:
                    samples.setdefault(temp_pt, []).append((float(t), float(temp_f[i])))
            if campaign == "spring":  # a clock error: a wall-clock time that never happened
                gap_t = datetime(2026, 3, 8, 3, 0, tzinfo=tz).timestamp()
                rows.append((gap_t + 1.0, 0, temp_pt, gap_t, "2026-03-08 02:30:00", 70.0, "GOOD"))
                note(temp_pt, "nonexistent_time")

    rows.sort(key=lambda r: (r[0], r[1], r[2]))
    events.sort(key=lambda e: e[0])
    out = Path(path)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".tmp")
    tmp.unlink(missing_ok=True)
    con = sqlite3.connect(tmp)
    try:
        for sql in _SCHEMA:
            con.execute(sql)
        con.executemany(
            "INSERT INTO hist_values (rec_no, point_name, sample_time, reading, status) "
            "VALUES (?, ?, ?, ?, ?)",
            [
                (n, r[2], r[4] or _local_text(r[3], tz), r[5], r[6])
                for n, r in enumerate(rows, start=1)
            ],
        )
        con.executemany(
            "INSERT INTO unit_procedures (proc_id, reactor, product, action, logged_at) "
            "VALUES (?, ?, ?, ?, ?)",
            [e[1:] for e in events],
        )
        con.commit()
    finally:
        con.close()
    os.replace(tmp, out)
    truth = {
        "format": TRUTH_FORMAT,
        "seed": seed,
        "zone": ZONE,
        "batches": sorted(truth_batches, key=lambda b: (b["start_s"], b["batch"])),
        "samples_degF_or_lab": {p: sorted(v) for p, v in samples.items()},
        "excluded": dict(sorted(planted.items())),
        "rows": len(rows),
    }
    out.with_name(out.stem + "_truth.json").write_text(
        json.dumps(truth, indent=1), encoding="utf-8"
    )
    return truth


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m sample_historian.other_schema",
        description="Write the second invented export (another table layout, degF, naive "
        "America/Chicago time). Example: python -m sample_historian.other_schema --out "
        "/tmp/other.db",
    )
    parser.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help=f"SQLite file to write (default: {DEFAULT_OUT})",
    )
    parser.add_argument(
        "--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default: {DEFAULT_SEED})"
    )
    args = parser.parse_args(argv)
    truth = generate_other(args.out, args.seed)
    print(
        f"wrote {args.out}: {truth['rows']} rows, {len(truth['batches'])} batches", file=sys.stderr
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
