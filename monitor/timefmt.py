"""Times for machines and for people: one place for every conversion and format.

Inside convmon a time is float epoch seconds (UTC). JSON documents carry ISO 8601
with offset, in UTC (`iso`); people read plant local time (`local`); durations
read the same everywhere (`duration`). `parse_time` reads a time a user typed.
"""

from __future__ import annotations

from datetime import UTC, datetime
from zoneinfo import ZoneInfo


def to_datetime(t_s: float) -> datetime:
    """Epoch seconds [s] to an aware UTC datetime."""
    return datetime.fromtimestamp(t_s, tz=UTC)


def to_epoch(dt: datetime) -> float:
    """Aware datetime to epoch seconds [s]."""
    if dt.tzinfo is None:
        raise ValueError("naive datetime: give a time zone")
    return dt.timestamp()


def iso(t_s: float | None) -> str | None:
    """ISO 8601 in UTC with offset, to the second, or None.

    Examples
    --------
    >>> iso(0.0)
    '1970-01-01T00:00:00+00:00'
    """
    return None if t_s is None else to_datetime(t_s).isoformat(timespec="seconds")


def from_iso(text: str | None) -> float | None:
    """Epoch seconds [s] of an ISO 8601 time with offset (as `iso` writes), or None."""
    return None if text is None else datetime.fromisoformat(text).timestamp()


def local(t_s: float | None, zone: str) -> str:
    """Plant local date and time with the zone's abbreviation ("2026-11-02 17:58 CET")."""
    if t_s is None:
        return "-"
    return to_datetime(t_s).astimezone(ZoneInfo(zone)).strftime("%Y-%m-%d %H:%M %Z")


def duration(seconds: float) -> str:
    """A humane duration: "40 s", "12 min", "3 h 10 min", "29 d".

    Examples
    --------
    >>> duration(40), duration(720), duration(11400), duration(29 * 86400 + 5000)
    ('40 s', '12 min', '3 h 10 min', '29 d')
    """
    s = abs(float(seconds))
    sign = "-" if seconds < 0 else ""
    if s < 60:
        return f"{sign}{s:.0f} s"
    if s < 3600:
        return f"{sign}{s / 60:.0f} min"
    if s < 172_800:
        h, m = divmod(round(s / 60), 60)
        return f"{sign}{h} h" + (f" {m} min" if m else "")
    return f"{sign}{s / 86_400:.0f} d"


def parse_time(text: str, zone: str) -> float:
    """A time a user typed: ISO 8601 with an offset (``2026-11-02T12:30+01:00``, ``…Z``),
    or without one, read in ``zone`` (the site's zone) [s].

    A time without an offset that the zone skips (clocks jump forward) or has twice
    (clocks go back) is refused: the message gives the offsets to choose from. Raises
    `ValueError` naming what was expected.

    Examples
    --------
    >>> parse_time("2026-11-02T12:30", "Europe/Berlin") == parse_time("2026-11-02T11:30Z", "UTC")
    True
    """
    try:
        dt = datetime.fromisoformat(text.strip())
    except ValueError:
        raise ValueError(
            f"expected an ISO 8601 time such as 2026-10-05T14:30 (in the site's zone) or "
            f"2026-10-05T14:30+02:00, got {text!r}"
        ) from None
    if dt.tzinfo is not None:
        return to_epoch(dt)
    tz = ZoneInfo(zone)
    first, second = dt.replace(tzinfo=tz, fold=0), dt.replace(tzinfo=tz, fold=1)
    if first.utcoffset() != second.utcoffset():
        if first.astimezone(UTC).astimezone(tz).replace(tzinfo=None) != dt:
            raise ValueError(
                f"{text!r} does not exist in {zone} (the clocks jump forward over it): "
                "give a time with its offset"
            )
        raise ValueError(
            f"{text!r} happens twice in {zone} (the clocks go back): give its offset, "
            f"{first.isoformat(timespec='minutes')} or {second.isoformat(timespec='minutes')}"
        )
    return to_epoch(first)
