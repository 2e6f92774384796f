"""Replay of an export as it arrived: the rows up to a plant time, in ``seq`` order.

The one replay of the demo and the tests. It reads a sample-plant export (SQLite) and
feeds a destination tick by tick:

* a live SQLite file (`LiveFile`; a path given to `Replay` makes one), which the demo,
  the kill/restart and the soak tests poll;
* anything with ``append_samples(rows)`` and ``append_events(rows)`` taking rows in role
  order - samples ``(seq, tag, ts, value, quality)``, events ``(seq, batch, unit, recipe,
  event, ts)``, times as the export's ISO text - such as an export written through
  SQLAlchemy on PostgreSQL or MariaDB (the outage tests).

The newest temperature row at or before the plant clock marks how far the export had
arrived. Rows can be injected after a tick's own rows (bad live rows in tests): with
``seq_gap`` = g, source seq n is written as n * g and the injected samples take the
numbers in between; injected events are numbered after every event of the source.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Protocol


def _iso(t_s: float) -> str:
    """Epoch seconds [s] as the export writes times (ISO 8601, milliseconds, UTC)."""
    return datetime.fromtimestamp(t_s, tz=UTC).isoformat(timespec="milliseconds")


class Destination(Protocol):
    """Where a replay writes: rows in role order, in arrival order."""

    def append_samples(self, rows: Sequence[tuple]) -> None: ...

    def append_events(self, rows: Sequence[tuple]) -> None: ...


class LiveFile:
    """A live SQLite export with the source's tables and indexes (a file there is replaced)."""

    def __init__(self, path: Path, src: sqlite3.Connection):
        path = Path(path)
        path.unlink(missing_ok=True)
        self.con = sqlite3.connect(path)
        for (sql,) in src.execute(
            "SELECT sql FROM sqlite_master WHERE sql IS NOT NULL AND type IN ('table', 'index')"
        ):
            self.con.execute(sql)
        self.con.commit()

    def append_samples(self, rows: Sequence[tuple]) -> None:
        self.con.executemany(
            "INSERT INTO tag_samples (seq, tag, ts, value, quality) VALUES (?, ?, ?, ?, ?)", rows
        )
        self.con.commit()

    def append_events(self, rows: Sequence[tuple]) -> None:
        self.con.executemany(
            "INSERT INTO batch_events (seq, batch_id, unit, recipe, event, ts) "
            "VALUES (?, ?, ?, ?, ?, ?)",
            rows,
        )
        self.con.commit()

    def close(self) -> None:
        self.con.close()


class Replay:
    """Feeds a sample-plant export into ``dest`` in arrival order, up to a plant time.

    ``dest`` is a path (a `LiveFile` is made there) or a `Destination`. ``seq`` is the
    last source seq delivered; ``src`` the read-only source, for a caller's own counts.
    """

    def __init__(
        self,
        src_path: Path,
        dest: Path | Destination,
        temperature_tags: Iterable[str],
        *,
        seq_gap: int = 1,
    ):
        if seq_gap < 1:
            raise ValueError(f"seq_gap must be >= 1, got {seq_gap}")
        self.src = sqlite3.connect(f"file:{src_path}?mode=ro", uri=True)
        self._own = isinstance(dest, str | Path)
        self.dest = LiveFile(Path(dest), self.src) if self._own else dest
        self.tags = list(temperature_tags)
        self.seq_gap = seq_gap
        self.seq = -1  # last source sample seq delivered
        self.event_seq = -1  # last source event seq delivered
        (last_event,) = self.src.execute("SELECT MAX(seq) FROM batch_events").fetchone()
        self._next_event_seq = (last_event or 0) + 1  # injected events come after the source's

    def cut(self, t_s: float) -> int:
        """The last source seq that has arrived by ``t_s``: that of the newest temperature row."""
        cut = -1
        for tag in self.tags:
            (seq,) = self.src.execute(
                "SELECT MAX(seq) FROM tag_samples WHERE tag = ? AND ts <= ?", (tag, _iso(t_s))
            ).fetchone()
            if seq is not None:
                cut = max(cut, seq)
        return cut

    def start(self, t_s: float, history_s: float | None = None) -> int:
        """Deliver everything up to ``t_s``; with ``history_s``, samples older than
        ``t_s - history_s`` never arrive (events always do). Returns the samples written."""
        if history_s is not None:
            (first,) = self.src.execute(
                "SELECT MIN(seq) FROM tag_samples WHERE ts >= ?", (_iso(t_s - history_s),)
            ).fetchone()
            if first is not None:
                self.seq = max(self.seq, first - 1)
        return self.advance_to(t_s)

    def advance_to(
        self, t_s: float, samples: Sequence[tuple] = (), events: Sequence[tuple] = ()
    ) -> int:
        """Deliver the rows that arrived by ``t_s``, then inject ``samples`` (tag, ts,
        value, quality) and ``events`` (batch, unit, recipe, event, ts) after them.

        Returns the number of sample rows written.
        """
        if len(samples) >= self.seq_gap:
            raise ValueError(
                f"{len(samples)} injected samples need seq_gap > {len(samples)}, got {self.seq_gap}"
            )
        cut = max(self.cut(t_s), self.seq)
        g = self.seq_gap
        rows = [
            (seq * g, tag, ts, value, quality)
            for seq, tag, ts, value, quality in self.src.execute(
                "SELECT seq, tag, ts, value, quality FROM tag_samples "
                "WHERE seq > ? AND seq <= ? ORDER BY seq",
                (self.seq, cut),
            )
        ]
        rows += [(cut * g + i, *row) for i, row in enumerate(samples, start=1)]
        ev = self.src.execute(
            "SELECT seq, batch_id, unit, recipe, event, ts FROM batch_events "
            "WHERE seq > ? AND ts <= ? ORDER BY seq",
            (self.event_seq, _iso(t_s)),
        ).fetchall()
        if ev:
            self.event_seq = max(e[0] for e in ev)
        for row in events:
            ev.append((self._next_event_seq, *row))
            self._next_event_seq += 1
        if rows:
            self.dest.append_samples(rows)
        if ev:
            self.dest.append_events(ev)
        self.seq = cut
        return len(rows)

    def close(self) -> None:
        self.src.close()
        if self._own:
            self.dest.close()


def export_end(db: Path) -> float:
    """Time of the newest sample in a sample-plant export [s]."""
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        (last,) = con.execute("SELECT MAX(ts) FROM tag_samples").fetchone()
    finally:
        con.close()
    dt = datetime.fromisoformat(last)
    return (dt if dt.tzinfo else dt.replace(tzinfo=UTC)).timestamp()
