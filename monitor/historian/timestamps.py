"""Timestamps of any export to UTC epoch seconds.

Text (ISO 8601 with or without offset), database datetimes (naive or aware)
and numbers (epoch seconds) are accepted. Naive values are read in the
configured IANA zone (the tz database as shipped with Python's ``zoneinfo``,
through pandas). At a fall-back the repeated hour is resolved by insertion
order when the export has a ``seq`` column: within a tag, rows before the local
clock is seen to go back are the first pass (daylight time); without ``seq``
such rows are ambiguous and left out (counted). A time that does not exist
(skipped at spring-forward) is an error row, counted.
"""

from __future__ import annotations

import re
import warnings
from datetime import datetime
from decimal import Decimal

import numpy as np
import pandas as pd

AMBIGUOUS = "ambiguous_dst"
NONEXISTENT = "nonexistent_time"
BAD_TIME = "bad_timestamp"
_OFFSET = r"^[+-]\d\d:?\d\d$"


def _parse_naive_text(base: pd.Series) -> np.ndarray:
    """Naive ISO text to int64 microseconds (NaT as int64 min)."""
    try:
        return np.asarray(base.to_numpy(dtype=object), dtype="datetime64[us]").astype(np.int64)
    except (ValueError, TypeError):
        parsed = pd.to_datetime(base, errors="coerce", format="ISO8601")
        return parsed.to_numpy(dtype="datetime64[us]").astype(np.int64)


def _fixed_width_parts(values: np.ndarray):
    """Fast path of `_text_to_parts`: ISO text all of one width, with one common offset (or
    none), parsed by numpy. ``None`` when the column is not like that."""
    try:
        text = np.asarray(values, dtype=str)
    except (TypeError, ValueError):
        return None
    n, width = len(text), text.dtype.itemsize // 4
    if n == 0 or width < 10 or (np.char.str_len(text) != width).any():
        return None
    chars = text.view(np.uint32).reshape(n, width)
    first = str(text[0])
    if first.endswith("Z"):
        cut, off = 1, 0.0
    elif re.match(_OFFSET, first[-6:]) and ":" in first[-6:]:
        cut, off = 6, (-1 if first[-6] == "-" else 1) * (int(first[-5:-3]) * 60 + int(first[-2:]))
    elif re.match(_OFFSET, first[-5:]) and width > 15:
        cut, off = 5, (-1 if first[-5] == "-" else 1) * (int(first[-4:-2]) * 60 + int(first[-2:]))
    else:
        cut, off = 0, np.nan
    if cut and not (chars[:, width - cut :] == chars[0, width - cut :]).all():
        return None
    base = np.ascontiguousarray(chars[:, : width - cut]).view(f"<U{width - cut}").ravel()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # numpy reads an offset left in the text: not here
            naive_us = base.astype("datetime64[us]").astype(np.int64)
    except (ValueError, DeprecationWarning, UserWarning):
        return None
    return naive_us, np.full(n, float(off))


def _text_to_parts(values: np.ndarray):
    """Split text into naive microseconds and offset minutes (NaN = no offset)."""
    fast = _fixed_width_parts(values)
    if fast is not None:
        return fast
    sr = pd.Series(values, dtype=object).astype(str).str.strip()
    tail6 = sr.str[-6:]
    tail5 = sr.str[-5:]
    has6 = tail6.str.match(r"^[+-]\d\d:\d\d$").to_numpy()
    has5 = ~has6 & tail5.str.match(r"^[+-]\d\d\d\d$").to_numpy() & (sr.str.len() > 15).to_numpy()
    is_z = sr.str.endswith("Z").to_numpy()
    base = sr.copy()
    off = np.full(len(sr), np.nan)
    if has6.any():
        base[has6] = sr[has6].str[:-6]
        t = tail6[has6]
        off[has6] = (
            np.where(t.str[0] == "-", -1, 1)
            * (t.str[1:3].astype(int) * 60 + t.str[4:6].astype(int))
        ).to_numpy()
    if has5.any():
        base[has5] = sr[has5].str[:-5]
        t = tail5[has5]
        off[has5] = (
            np.where(t.str[0] == "-", -1, 1)
            * (t.str[1:3].astype(int) * 60 + t.str[3:5].astype(int))
        ).to_numpy()
    if is_z.any():
        base[is_z] = sr[is_z].str[:-1]
        off[is_z] = 0.0
    return _parse_naive_text(base), off


def _localize(naive_us: np.ndarray, zone: str, seq, group):
    """Naive local microseconds to epoch seconds; returns (t_s, reason)."""
    n = len(naive_us)
    t = np.full(n, np.nan)
    reason = np.full(n, None, dtype=object)
    idx = pd.DatetimeIndex(naive_us.astype("datetime64[us]"))
    if zone == "UTC":
        return naive_us / 1e6, reason
    early = idx.tz_localize(zone, ambiguous=np.ones(n, bool), nonexistent="NaT")
    late = idx.tz_localize(zone, ambiguous=np.zeros(n, bool), nonexistent="NaT")
    e = early.as_unit("us").asi8.astype(float)
    lt = late.as_unit("us").asi8.astype(float)
    nat = early.isna()
    amb = ~nat & (early.asi8 != late.asi8)
    t[~nat] = lt[~nat] / 1e6
    reason[nat] = NONEXISTENT
    if amb.any():
        if seq is None:
            reason[amb] = AMBIGUOUS
            t[amb] = np.nan
        else:
            pos = np.flatnonzero(amb)
            df = pd.DataFrame(
                {
                    "pos": pos,
                    "seq": np.asarray(seq)[pos],
                    "g": np.asarray(group, dtype=object)[pos] if group is not None else 0,
                    "naive": naive_us[pos],
                    "day": naive_us[pos] // 86_400_000_000,
                }
            )
            df = df.sort_values(["g", "day", "seq"], kind="stable")
            keys = [df["g"], df["day"]]
            prev_max = df.groupby(keys)["naive"].cummax().groupby(keys).shift(1)
            went_back = (df["naive"] < prev_max).fillna(False).astype(bool)
            second = went_back.groupby(keys).cummax().astype(bool).to_numpy()
            p = df["pos"].to_numpy()
            t[p] = np.where(second, lt[p], e[p]) / 1e6
    t[nat] = np.nan
    return t, reason


def to_epoch_seconds(values, naive_zone: str, *, seq=None, group=None):
    """Convert a column of timestamps to epoch seconds [s].

    Parameters
    ----------
    values : sequence
        Text, datetimes or numbers, as the database returned them.
    naive_zone : str
        IANA zone of values written without an offset.
    seq : sequence of int, optional
        Insertion order, used to resolve the repeated hour at a fall-back.
    group : sequence, optional
        Series key (the tag) within which insertion order is read.

    Returns
    -------
    t_s : numpy.ndarray
        Epoch seconds, NaN where the time cannot be used.
    reason : numpy.ndarray of object
        None, or why the time cannot be used (``ambiguous_dst``, ``nonexistent_time``,
        ``bad_timestamp``).
    """
    arr = np.asarray(values, dtype=object) if not isinstance(values, np.ndarray) else values
    n = len(arr)
    if n == 0:
        return np.empty(0), np.empty(0, dtype=object)
    first = next((v for v in arr if v is not None), None)
    reason = np.full(n, None, dtype=object)
    # Decimal: MySQL/MariaDB DOUBLE and NUMERIC columns reflect as Decimal-returning types
    if isinstance(first, int | float | Decimal | np.integer | np.floating) and not isinstance(
        first, bool
    ):
        t = np.asarray(arr, dtype=float)
        reason[~np.isfinite(t)] = BAD_TIME
        return t, reason
    if isinstance(first, str):
        naive_us, off = _text_to_parts(arr)
    elif isinstance(first, datetime | pd.Timestamp):
        off = np.array(
            [
                np.nan if v is None or v.tzinfo is None else v.utcoffset().total_seconds() / 60
                for v in arr
            ]
        )
        naive = [None if v is None else v.replace(tzinfo=None) for v in arr]
        naive_us = np.asarray(
            pd.to_datetime(pd.Series(naive, dtype=object), errors="coerce").to_numpy(
                dtype="datetime64[us]"
            )
        ).astype(np.int64)
    else:
        naive_us, off = _text_to_parts(np.array([str(v) for v in arr], dtype=object))
    bad = naive_us == np.iinfo(np.int64).min
    t = np.full(n, np.nan)
    aware = ~np.isnan(off) & ~bad
    t[aware] = naive_us[aware] / 1e6 - off[aware] * 60.0
    naive = np.isnan(off) & ~bad
    if naive.any():
        sub_seq = None if seq is None else np.asarray(seq)[naive]
        sub_group = None if group is None else np.asarray(group, dtype=object)[naive]
        tn, rn = _localize(naive_us[naive], naive_zone, sub_seq, sub_group)
        t[naive] = tn
        reason[naive] = rn
    reason[bad] = BAD_TIME
    return t, reason


def format_bound(t_s: float, style: str, zone: str) -> object:
    """A value to compare a time column with, in the column's own representation."""
    from datetime import UTC
    from zoneinfo import ZoneInfo

    dt = datetime.fromtimestamp(t_s, tz=UTC)
    if style == "epoch":
        return t_s
    if style.startswith("text"):
        sep = "T" if style.endswith("T") else " "
        local = (
            dt.astimezone(ZoneInfo(zone)).replace(tzinfo=None)
            if style.startswith("text-naive")
            else dt.replace(tzinfo=None)
        )
        return local.strftime(f"%Y-%m-%d{sep}%H:%M:%S")
    if style == "datetime-aware":
        return dt
    return dt.astimezone(ZoneInfo(zone)).replace(tzinfo=None)
