"""Replays an export into a live file while a monitor process polls it; kills it at will."""

from __future__ import annotations

import json
import math
import random
import subprocess
import sys
import time
from datetime import datetime
from pathlib import Path

from monitor.store import Store
from sample_historian.replay import Replay
from tests import fixtures_plant

REPO = Path(__file__).resolve().parents[2]


def write_config(plant_config: Path, live_db: Path, store_db: Path, out: Path) -> Path:
    """The plant's configuration pointed at a live replay file and a store of its own."""
    return fixtures_plant.write_config(plant_config, live_db, out, store_db=store_db)


class Worker:
    def __init__(self, config: Path):
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "tests.reliability.worker", str(config)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
            cwd=REPO,
        )
        assert self.proc.stdout.readline().strip() == "ready"

    def send(self, cmd: str) -> None:
        self.proc.stdin.write(cmd + "\n")
        self.proc.stdin.flush()

    def wait_done(self) -> str:
        line = self.proc.stdout.readline()
        if not line.startswith("done"):
            raise RuntimeError(f"worker said {line!r}")
        return line

    def kill(self) -> None:
        self.proc.kill()  # SIGKILL: no clean-up of any kind
        self.proc.wait()

    def stop(self) -> None:
        self.send("quit")
        self.proc.wait(timeout=30)


def replay_run(
    source_db: Path,
    plant_config: Path,
    work: Path,
    *,
    start_s: float,
    ticks: int,
    step_s: float,
    seed: int | None,
) -> tuple[dict, dict]:
    """One replay; with a seed, SIGKILL the monitor 1-3 times at random moments."""
    work.mkdir(parents=True, exist_ok=True)
    live, store = work / "live.db", work / "store.db"
    for p in (live, store):
        p.unlink(missing_ok=True)
    cfg = write_config(plant_config, live, store, work / "c.toml")
    import tomllib

    tags = [u["temperature_tag"] for u in tomllib.loads(cfg.read_text())["units"]]
    replay = Replay(source_db, live, tags)
    replay.advance_to(start_s)
    rng = random.Random(seed)
    kills = set(rng.sample(range(ticks), k=rng.randint(1, 3))) if seed is not None else set()
    stats = {"kills": 0, "restarts": 0, "cycles": 0}
    worker = Worker(cfg)
    for k in range(ticks):
        replay.advance_to(start_s + (k + 1) * step_s)
        worker.send("cycle")
        if k in kills:
            time.sleep(rng.uniform(0.0, 0.4))  # lands before, inside or after the commit
            worker.kill()
            stats["kills"] += 1
            worker = Worker(cfg)
            stats["restarts"] += 1
            worker.send("cycle")
        worker.wait_done()
        stats["cycles"] += 1
    worker.stop()
    replay.close()
    s = Store(f"sqlite:///{store}")
    snap = s.snapshot()
    s.close()
    return snap, stats


def same_snapshot(a: dict, b: dict, rel: float = 1e-9) -> list[str]:
    """Differences between two store snapshots (keys exact, floats to ``rel``)."""
    diffs = []
    for table in a:
        ra, rb = a[table], b[table]
        if len(ra) != len(rb):
            diffs.append(f"{table}: {len(ra)} rows vs {len(rb)}")
            continue
        for x, y in zip(ra, rb, strict=True):
            for u, v in zip(x, y, strict=True):
                if isinstance(u, float) and isinstance(v, float):
                    if not math.isclose(u, v, rel_tol=rel, abs_tol=1e-9):
                        diffs.append(f"{table}: {x} vs {y}")
                        break
                elif u != v:
                    diffs.append(f"{table}: {x} vs {y}")
                    break
    return diffs


def iso_to_s(text: str) -> float:
    return datetime.fromisoformat(text).timestamp()


__all__ = ["replay_run", "same_snapshot", "iso_to_s", "json"]
