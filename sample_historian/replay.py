"""Replay of an export as it arrived: the rows up to a plant time, in ``seq`` order.

Feeds a live SQLite file from the sample plant's export while a monitor polls it
(the demo, the kill/restart and soak tests). The newest temperature row at or
before the plant clock marks how far the export had arrived.
"""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime
from pathlib import Path


def _iso(t_s: float) -> str:
    return datetime.fromtimestamp(t_s, tz=UTC).isoformat(timespec="milliseconds")


def _copy_schema(src: sqlite3.Connection, dst: sqlite3.Connection) -> None:
    for (sql,) in src.execute(
        "SELECT sql FROM sqlite_master WHERE sql IS NOT NULL AND type IN ('table', 'index')"
    ):
        dst.execute(sql)
    dst.commit()


class Replay:
    """Feeds the export into a live file in arrival order, up to a plant time."""

    def __init__(self, src_path: Path, live_path: Path, temperature_tags: list[str]):
        if live_path.exists():
            live_path.unlink()
        self.src = sqlite3.connect(f"file:{src_path}?mode=ro", uri=True)
        self.dst = sqlite3.connect(live_path)
        _copy_schema(self.src, self.dst)
        self.tags = temperature_tags
        self.seq = -1
        self.event_seq = -1

    def _cut(self, clock_iso: str) -> int:
        """The last seq that has arrived by ``clock_iso``: that of the newest temperature row."""
        cut = -1
        for tag in self.tags:
            row = self.src.execute(
                "SELECT MAX(seq) FROM tag_samples WHERE tag = ? AND ts <= ?", (tag, clock_iso)
            ).fetchone()
            if row[0] is not None:
                cut = max(cut, row[0])
        return cut

    def advance_to(self, clock_s: float) -> int:
        iso = _iso(clock_s)
        cut = self._cut(iso)
        rows = self.src.execute(
            "SELECT seq, tag, ts, value, quality FROM tag_samples WHERE "
            "seq > ? AND seq <= ? ORDER BY seq",
            (self.seq, cut),
        ).fetchall()
        self.dst.executemany("INSERT INTO tag_samples VALUES (?, ?, ?, ?, ?)", rows)
        ev = self.src.execute(
            "SELECT seq, batch_id, unit, recipe, event, ts FROM batch_events "
            "WHERE seq > ? AND ts <= ? ORDER BY seq",
            (self.event_seq, iso),
        ).fetchall()
        self.dst.executemany("INSERT INTO batch_events VALUES (?, ?, ?, ?, ?, ?)", ev)
        self.dst.commit()
        self.seq = max(self.seq, cut)
        if ev:
            self.event_seq = max(e[0] for e in ev)
        return len(rows)

    def close(self):
        self.src.close()
        self.dst.close()


def export_end(db: Path) -> float:
    """Time of the newest sample in a sample-plant export [s]."""
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        (last,) = con.execute("SELECT MAX(ts) FROM tag_samples").fetchone()
    finally:
        con.close()
    dt = datetime.fromisoformat(last)
    return (dt if dt.tzinfo else dt.replace(tzinfo=UTC)).timestamp()
