"""`convmon demo` end to end (the short replay): it runs the whole job and says where."""

from __future__ import annotations

import subprocess
import sys

from sqlalchemy import select

from monitor.store import Store, kinetics_versions


def test_demo_runs_the_whole_job(tmp_path):
    out = tmp_path / "demo"
    r = subprocess.run(
        [sys.executable, "-m", "monitor", "demo", "--fast", "--out", str(out)],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert r.returncode == 0, r.stderr[-2000:]
    assert "demo done" in r.stdout and "advisory only" in r.stdout
    # the kinetics were fitted from history and used for the replay
    fitted = sorted((out / "kinetics").glob("*.toml"))
    assert len(fitted) == 2 and all(
        (out / "kinetics" / f"{p.stem}_parity.png").exists() for p in fitted
    )
    store = Store(f"sqlite:///{out / 'convmon.db'}")
    try:
        counts = store.row_counts()
        with store.engine.connect() as conn:
            sources = {r.source for r in conn.execute(select(kinetics_versions))}
    finally:
        store.close()
    assert counts["estimates"] and counts["batches"]
    assert sources and sources <= {str(p) for p in fitted}  # the fitted files, not the shipped
    assert "P50" in r.stdout and "band" in r.stdout
