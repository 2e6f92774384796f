"""A tiny generated site for command-line tests: an SQLite export, a kinetics file, a config.

One unit (``R-1``, tags ``R1.TT`` in °C and ``R1.AS``, concentration of A in mol/L),
one recipe (``AX``, first order). The batches run one after another, ``BATCH_S`` each
with a gap between: all but the last complete, the last running (no end event). The
temperature holds at ``T_C``; assays follow the recipe's own kinetics exactly (at
activity 1), so the estimator has nothing to quarrel with. Batch ids are whatever the
caller gives (historian text: markup, ``../``, escapes, emoji) and go in with bound
parameters.
"""

from __future__ import annotations

import math
import sqlite3
from datetime import UTC, datetime
from pathlib import Path

import tomli_w

#: Start of the first batch: 2026-10-05 06:00 UTC [s].
T0 = datetime(2026, 10, 5, 6, 0, tzinfo=UTC).timestamp()
BATCH_S = 3 * 3600.0
GAP_S = 3600.0
STEP_S = 60.0
T_C = 60.0
C_A0 = 1.0
K_REF = 2.0e-4  # [1/s] at T_REF_K
T_REF_K = 333.15
ASSAY_AT_S = (3600.0, 7200.0)

KINETICS = {
    "rate_law": "power",
    "order": 1.0,
    "k_ref": K_REF,
    "t_ref_k": T_REF_K,
    "ea_j_per_mol": 60000.0,
    "activity_sd": 0.1,
}


def _iso(t_s: float) -> str:
    return datetime.fromtimestamp(t_s, tz=UTC).isoformat(timespec="seconds")


def batch_start(i: int) -> float:
    """Start of the ``i``-th batch [s]."""
    return T0 + i * (BATCH_S + GAP_S)


def last_data_s(n_batches: int) -> float:
    """Time of the export's last temperature sample [s]."""
    return batch_start(n_batches - 1) + BATCH_S


def write_export(path: Path, batch_ids: list[str]) -> Path:
    """The export: ``batch_ids`` in order, the last one running."""
    con = sqlite3.connect(path)
    con.execute(
        "CREATE TABLE tag_samples (seq INTEGER PRIMARY KEY, tag TEXT, ts TEXT, "
        "value REAL, quality INTEGER)"
    )
    con.execute(
        "CREATE TABLE batch_events (seq INTEGER PRIMARY KEY, batch_id TEXT, unit TEXT, "
        "recipe TEXT, event TEXT, ts TEXT)"
    )
    samples, events = [], []
    for i, bid in enumerate(batch_ids):
        t0 = batch_start(i)
        events.append((bid, "R-1", "AX", "start", _iso(t0)))
        n = int(BATCH_S / STEP_S)
        samples += [("R1.TT", _iso(t0 + k * STEP_S), T_C, 0) for k in range(n + 1)]
        for dt in ASSAY_AT_S:
            c = C_A0 * math.exp(-K_REF * dt)  # first order at T_ref: exact
            samples.append(("R1.AS", _iso(t0 + dt), round(c, 4), 0))
        if i < len(batch_ids) - 1:
            events.append((bid, "R-1", "AX", "end", _iso(t0 + BATCH_S)))
    samples.sort(key=lambda r: r[1])
    con.executemany(
        "INSERT INTO tag_samples (tag, ts, value, quality) VALUES (?, ?, ?, ?)", samples
    )
    con.executemany(
        "INSERT INTO batch_events (batch_id, unit, recipe, event, ts) VALUES (?, ?, ?, ?, ?)",
        events,
    )
    con.commit()
    con.close()
    return path


def config_dict(historian: Path, store_url: str, kinetics: Path) -> dict:
    return {
        "site": {"timezone": "Europe/Berlin"},
        "historian": {"url": f"sqlite:///{historian}", "retries": 0},
        "store": {"url": store_url},
        "poll": {"interval_s": 1},
        "units": [
            {"name": "R-1", "temperature_tag": "R1.TT", "assay_tag": "R1.AS"},
        ],
        "recipes": {
            "AX": {
                "kinetics": str(kinetics),
                "assay_kind": "concentration",
                "assay_sd": 0.02,
                "initial_concentration": C_A0,
                "target_conversion": 0.95,
                "temperature_plan": [[0, T_C]],
            }
        },
    }


def write_site(
    folder: Path,
    batch_ids: list[str],
    *,
    store_url: str | None = None,
    historian: Path | None = None,
    kinetics: Path | None = None,
    config_name: str = "convmon.toml",
) -> Path:
    """Export (unless ``historian`` is given), kinetics file and configuration in
    ``folder``; returns the configuration's path. The store defaults to ``store.db``
    in ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    if historian is None:
        historian = write_export(folder / "plant.db", batch_ids)
    if kinetics is None:
        kinetics = folder / "ax.toml"
        kinetics.write_text(tomli_w.dumps(KINETICS), encoding="utf-8")
    store_url = store_url or f"sqlite:///{folder / 'store.db'}"
    path = folder / config_name
    path.write_text(tomli_w.dumps(config_dict(historian, store_url, kinetics)), encoding="utf-8")
    return path
