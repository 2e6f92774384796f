"""Replays an export into a live file while a monitor process polls it; kills it at will."""

from __future__ import annotations

import random
import subprocess
import sys
import time
import tomllib
from datetime import datetime
from pathlib import Path

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
    stalls: frozenset[int] = frozenset(),
) -> tuple[str, dict]:
    """One replay; with a seed, SIGKILL the monitor 1-3 times at random moments.

    At the ticks in ``stalls`` no rows arrive while the clock runs on (a stalled feed:
    stale-data alerts are raised, and cleared when the rows come). Returns the URL of
    the store it left and its figures (kills, restarts, cycles).
    """
    work.mkdir(parents=True, exist_ok=True)
    live, store = work / "live.db", work / "store.db"
    for p in (live, store):
        p.unlink(missing_ok=True)
    cfg = write_config(plant_config, live, store, work / "c.toml")
    tags = [u["temperature_tag"] for u in tomllib.loads(cfg.read_text())["units"]]
    replay = Replay(source_db, live, tags)
    replay.start(start_s)
    rng = random.Random(seed)
    kills = set(rng.sample(range(ticks), k=rng.randint(1, 3))) if seed is not None else set()
    stats = {"kills": 0, "restarts": 0, "cycles": 0}
    worker = Worker(cfg)
    for k in range(ticks):
        t = start_s + (k + 1) * step_s
        if k not in stalls:
            replay.advance_to(t)
        worker.send(f"cycle {t!r}")
        if k in kills:
            time.sleep(rng.uniform(0.0, 0.4))  # lands before, inside or after the commit
            worker.kill()
            stats["kills"] += 1
            worker = Worker(cfg)
            stats["restarts"] += 1
            worker.send(f"cycle {t!r}")
        worker.wait_done()
        stats["cycles"] += 1
    worker.stop()
    replay.close()
    return f"sqlite:///{store}", stats


def iso_to_s(text: str) -> float:
    return datetime.fromisoformat(text).timestamp()


__all__ = ["replay_run", "iso_to_s", "write_config"]
