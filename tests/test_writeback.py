"""Write-back of calculated tags: narrow shape, idempotent on (tag, ts), every backend."""

from __future__ import annotations

import uuid

import pytest
from sqlalchemy import create_engine, inspect, text

from monitor.config import WritebackConfig
from monitor.outputs.writeback import BAD_NO_DATA, WriteBack


def _row(at_s, end=None):
    return {
        "at_s": at_s,
        "conversion": 0.5,
        "conversion_sd": 0.01,
        "activity": 1.02,
        "predicted_end_s": end,
        "p10_s": end,
        "p90_s": end,
    }


@pytest.fixture(params=["sqlite", "postgres", "mariadb"])
def wb_url(request, tmp_path):
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'calc.db'}"
    return request.getfixturevalue(f"{request.param}_url")


def test_writeback_is_idempotent(wb_url):
    table = f"calc_{uuid.uuid4().hex[:8]}"
    wb = WriteBack(WritebackConfig(enabled=True, url=wb_url, table=table, tag_prefix="CM"))
    try:
        items = [("R-1", _row(1_800_000_000.0, 1_800_003_600.0)), ("R-2", _row(1_800_000_000.0))]
        assert wb.write(items) == 12
        wb.write(items)  # the same estimates again: nothing new
        wb.write([("R-1", _row(1_800_000_030.0, 1_800_003_600.0))])
        with wb.engine.connect() as conn:
            n = conn.execute(text(f"SELECT COUNT(*) FROM {table}")).scalar()  # noqa: S608
            q = conn.execute(
                text(
                    f"SELECT quality, value FROM {table} "  # noqa: S608
                    "WHERE tag = 'CM.R-2.END_P50'"
                )
            ).one()
            end = (
                conn.execute(
                    text(
                        f"SELECT value FROM {table} "  # noqa: S608
                        "WHERE tag = 'CM.R-1.END_P50'"
                    )
                )
                .scalars()
                .all()
            )
        assert n == 18
        assert end == [1_800_003_600.0] * 2  # epoch seconds kept to the second (double)
        assert q[0] == BAD_NO_DATA and q[1] is None  # unreachable target: no value, Bad
    finally:
        with wb.engine.begin() as conn:
            conn.execute(text(f"DROP TABLE {table}"))
        wb.close()


def test_writeback_refuses_a_table_without_the_columns(tmp_path):
    from monitor.errors import SchemaError

    url = f"sqlite:///{tmp_path / 'calc.db'}"
    eng = create_engine(url)
    with eng.begin() as conn:
        conn.execute(text("CREATE TABLE calc (tag TEXT, ts TEXT)"))
    with pytest.raises(SchemaError, match="value"):
        WriteBack(WritebackConfig(enabled=True, url=url, table="calc"))
    assert inspect(eng).has_table("calc")
