"""One comparison of two monitor stores: every column of every table.

`read_store` reads every table a store holds (reflected, so a table the head schema
does not name is read too); `compare_stores` matches the rows of two stores by key
and compares every other column, returning the differences as readable lines (an
empty list: the stores are equal). Used by the store contract, idempotence,
kill/restart and outage tests.

Rules:

* Tables: the same names in both. Rows are matched by key, exactly: a table's natural
  key where its primary key is a surrogate ``id`` (estimates: batch and time; alerts:
  batch, kind and raise time), else its primary key. The surrogate ids are compared
  as columns.
* Floats: equal within ``rel`` relative (default `REL` = 1e-9, no absolute floor). Two
  runs that saw the same rows may still sum them in another order (a restart rebuilds
  a batch's Θ sum from the historian in one pass; a live monitor added it poll by
  poll), which moves the last bits; 1e-9 is far above that noise and far below any
  difference that matters. A test that needs a looser tolerance states why beside it.
* Text holding JSON (the estimate document, warnings, the watermark) is parsed and
  compared as data under the same rules: its numbers are those same floats, printed
  in full by ``json.dumps``.
* Inside such documents an ISO 8601 time is compared as epoch seconds within ``rel``
  (1e-9 of a 2026 epoch time is about 1.8 s): it is printed to the second from a float
  time, so float noise can flip its last printed second.
* Other text (alert messages, forecast notes, warning lines) must be equal except for
  the numbers in it, which are compared within ``rel``: a message may print a float
  (e.g. an assay residual in sd). Everything around the numbers must match exactly.

An exclusion is ``{"table.column": "why"}`` (or ``{"table": "why"}`` for a whole
table); a reason is required, so every column not compared says why.
"""

from __future__ import annotations

import json
import math
import re
from datetime import datetime
from typing import Any

from sqlalchemy import Float, MetaData, UniqueConstraint, create_engine, select
from sqlalchemy.engine import Engine

from monitor.store import Store
from monitor.store.tables import meta as head_meta

REL = 1e-9
_NUMBER = re.compile(r"[-+]?(?:\d+\.\d*|\.\d+|\d+)(?:[eE][-+]?\d+)?")

Dump = dict[str, dict]  # table -> {key tuple: row dict}


def _key_columns(table) -> list[str]:
    """Natural key of a head table with a surrogate id, else the primary key."""
    head = head_meta.tables.get(table.name)
    source = head if head is not None else table
    pk = [c.name for c in source.primary_key.columns]
    if pk == ["id"]:
        unique = [c for c in source.constraints if isinstance(c, UniqueConstraint)]
        if unique:
            return [c.name for c in unique[0].columns]
    return pk or [c.name for c in table.columns]


def read_store(source: Store | Engine | str) -> Dump:
    """Every row of every table of a store, keyed by its table's key (see module doc)."""
    engine = source.engine if isinstance(source, Store) else source
    own = isinstance(engine, str)
    if own:
        engine = create_engine(engine)
    try:
        md = MetaData()
        md.reflect(bind=engine)
        for table in md.tables.values():
            for col in table.columns:
                if isinstance(col.type, Float):  # MySQL's reflected DOUBLE reads as Decimal
                    col.type.asdecimal = False
        out: Dump = {}
        with engine.connect() as conn:
            for name, table in sorted(md.tables.items()):
                key = _key_columns(table)
                rows = {}
                for r in conn.execute(select(table)):
                    row = dict(r._mapping)
                    k = tuple(row[c] for c in key)
                    if k in rows:
                        raise AssertionError(f"{name}: key {k} twice (key columns {key})")
                    rows[k] = row
                out[name] = rows
        return out
    finally:
        if own:
            engine.dispose()


def _short(v: Any, n: int = 120) -> str:
    text = repr(v)
    return text if len(text) <= n else text[: n - 3] + "..."


def _close(a: float, b: float, rel: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return a == b or math.isclose(a, b, rel_tol=rel, abs_tol=0.0)


def _iso_epoch(text: str) -> float | None:
    if not (len(text) >= 19 and text[4] == "-" and text[10] == "T"):
        return None
    try:
        dt = datetime.fromisoformat(text)
    except ValueError:
        return None
    return dt.timestamp() if dt.tzinfo is not None else None


def _as_json(text: str):
    if text[:1] not in ("{", "["):
        return None
    try:
        return json.loads(text)
    except ValueError:
        return None


def _text_same(a: str, b: str, rel: float, *, in_document: bool) -> bool:
    if a == b:
        return True
    if in_document:
        ta, tb = _iso_epoch(a), _iso_epoch(b)
        if ta is not None and tb is not None:
            return _close(ta, tb, rel)
    na, nb = _NUMBER.findall(a), _NUMBER.findall(b)
    return (
        _NUMBER.sub("#", a) == _NUMBER.sub("#", b)
        and len(na) == len(nb)
        and all(_close(float(x), float(y), rel) for x, y in zip(na, nb, strict=True))
    )


def _diff_values(a, b, rel: float, *, in_document: bool = False, path: str = "") -> list[str]:
    """Where ``a`` and ``b`` differ under the module's rules ([] when they agree)."""
    if a is None or b is None:
        return [] if a is b else [f"{path}: {_short(a)} != {_short(b)}"]
    if isinstance(a, bool) or isinstance(b, bool):
        return [] if a == b else [f"{path}: {_short(a)} != {_short(b)}"]
    if isinstance(a, int | float) and isinstance(b, int | float):
        if isinstance(a, int) and isinstance(b, int):
            same = a == b
        else:
            same = _close(float(a), float(b), rel)
        return [] if same else [f"{path}: {_short(a)} != {_short(b)}"]
    if isinstance(a, str) and isinstance(b, str):
        if a == b:
            return []
        ja, jb = _as_json(a), _as_json(b)
        if ja is not None and jb is not None:  # a document: its differences, by path
            return _diff_values(ja, jb, rel, in_document=True, path=path)
        same = _text_same(a, b, rel, in_document=in_document)
        return [] if same else [f"{path}: {_short(a)} != {_short(b)}"]
    if isinstance(a, dict) and isinstance(b, dict):
        out = []
        for k in sorted(set(a) | set(b), key=str):
            if k not in a or k not in b:
                out.append(f"{path}.{k}: only in {'B' if k not in a else 'A'}")
            else:
                out += _diff_values(a[k], b[k], rel, in_document=True, path=f"{path}.{k}")
        return out
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{path}: {len(a)} items != {len(b)}: {_short(a)} vs {_short(b)}"]
        out = []
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            out += _diff_values(x, y, rel, in_document=True, path=f"{path}[{i}]")
        return out
    return [] if a == b else [f"{path}: {_short(a)} != {_short(b)}"]


def compare_stores(
    a: Store | Engine | str | Dump,
    b: Store | Engine | str | Dump,
    *,
    rel: float = REL,
    exclude: dict[str, str] | None = None,
) -> list[str]:
    """Differences between two stores, one readable line each; [] when they agree.

    ``a`` and ``b`` are stores (a `Store`, an engine or a URL) or what `read_store`
    returned for one. ``exclude`` maps ``"table.column"`` or ``"table"`` to the reason
    it is not compared; every other column of every table is.
    """
    exclude = dict(exclude or {})
    if _url(a) is not None and _url(a) == _url(b):
        raise ValueError(f"a store compared with itself proves nothing: {_url(a)}")
    da = a if isinstance(a, dict) else read_store(a)
    db = b if isinstance(b, dict) else read_store(b)
    if da is db:
        raise ValueError("a store compared with itself proves nothing")
    for what, why in exclude.items():
        if not (isinstance(why, str) and why.strip()):
            raise ValueError(f"exclusion {what!r} needs a reason")
        table, _, column = what.partition(".")
        rows = [r for d in (da, db) for r in d.get(table, {}).values()]
        if (table not in da and table not in db) or (column and not any(column in r for r in rows)):
            raise ValueError(f"exclusion {what!r}: no such table or column (or no rows)")
    out = []
    for name in sorted(set(da) | set(db)):
        if name in exclude:
            continue
        if name not in da or name not in db:
            out.append(f"table {name}: only in {'B' if name not in da else 'A'}")
            continue
        ra, rb = da[name], db[name]
        for k in sorted(set(ra) - set(rb), key=repr):
            out.append(f"{name}{list(k)}: row only in A")
        for k in sorted(set(rb) - set(ra), key=repr):
            out.append(f"{name}{list(k)}: row only in B")
        for k in sorted(set(ra) & set(rb), key=repr):
            x, y = ra[k], rb[k]
            for col in sorted(set(x) | set(y)):
                if f"{name}.{col}" in exclude:
                    continue
                if col not in x or col not in y:
                    out.append(f"{name}.{col}: column only in {'B' if col not in x else 'A'}")
                    continue
                out += _diff_values(x[col], y[col], rel, path=f"{name}{list(k)}.{col}")
    return out


def _url(source) -> str | None:
    if isinstance(source, Store):
        source = source.engine
    if isinstance(source, Engine):
        return source.url.render_as_string(hide_password=False)
    return source if isinstance(source, str) else None


def row_counts(dump: Dump) -> dict[str, int]:
    return {name: len(rows) for name, rows in dump.items()}
