"""``estimate --at`` through the command line: time travel refused, times read one way
(issue #10, item 4).

On the tiny site (site zone Europe/Berlin; batch B-1 06:00-09:00 UTC, complete; B-2
from 10:00 UTC, running, last data 13:00 UTC = 15:00 CEST). Before this change an
``--at`` after the last data was accepted (exit 0) and "predicted" from a trace held
flat into the future; naive times on a clock change were read silently: the refusals
below failed.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime

import pytest

from monitor.timefmt import iso, parse_time
from tests.cli_runner import convmon
from tests.test_cli import one_error_line
from tests.tiny_site import last_data_s, write_site

LAST = last_data_s(2)  # 2026-10-05 13:00 UTC


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    return write_site(tmp_path_factory.mktemp("travel"), ["B-1", "B-2"])


def _estimate(site, batch: str, *at: str):
    return convmon("estimate", "--config", site, "--batch", batch, *at, "--json")


def test_tiny_site_times_are_what_the_tests_say():
    assert datetime(2026, 10, 5, 13, 0, tzinfo=UTC).timestamp() == LAST


@pytest.mark.parametrize(
    "at",
    ["2026-10-05T15:00:01+02:00", "2026-10-05T13:00:01Z", "2026-10-05T15:01", "2026-10-06"],
)
def test_at_after_the_last_data_of_a_running_batch_is_refused(site, at):
    r = _estimate(site, "B-2", "--at", at)
    assert r.exit_code == 2
    line = one_error_line(r)
    assert "is after the last data of batch 'B-2'" in line
    assert "2026-10-05 15:00 CEST (2026-10-05T13:00:00+00:00)" in line  # local and UTC


def test_at_after_the_end_of_a_complete_batch_is_refused(site):
    r = _estimate(site, "B-1", "--at", "2026-10-05T11:30+02:00")  # ended 09:00 UTC
    assert r.exit_code == 2
    assert "2026-10-05 11:00 CEST (2026-10-05T09:00:00+00:00)" in one_error_line(r)


def test_at_the_last_data_and_before_it_are_estimates(site):
    latest = json.loads(_estimate(site, "B-2").stdout)
    at_last = _estimate(site, "B-2", "--at", "2026-10-05T15:00")
    assert at_last.exit_code == 0, at_last.stderr
    assert json.loads(at_last.stdout)["conversion"] == latest["conversion"]
    back = json.loads(_estimate(site, "B-2", "--at", "2026-10-05T13:00").stdout)
    assert back["at"] == iso(LAST - 2 * 3600.0)
    assert back["conversion"] < latest["conversion"]


def test_an_offset_and_the_site_zone_name_one_moment(site):
    """Without an offset, --at is in the site's zone ([site] timezone: Europe/Berlin)."""
    docs = [
        json.loads(_estimate(site, "B-2", "--at", at).stdout)
        for at in ("2026-10-05T12:30", "2026-10-05T12:30+02:00", "2026-10-05T10:30Z")
    ]
    assert {d["at"] for d in docs} == {"2026-10-05T10:30:00+00:00"}
    assert len({d["conversion"] for d in docs}) == 1


@pytest.mark.parametrize(
    "at, words",
    [
        ("yesterday", "expected an ISO 8601 time"),
        ("2026-10-05T25:00", "expected an ISO 8601 time"),
        ("2026-10-05T05:00Z", "before batch B-2 started"),
    ],
)
def test_a_bad_at_is_one_line_exit_2(site, at, words):
    r = _estimate(site, "B-2", "--at", at)
    assert r.exit_code == 2
    line = one_error_line(r)
    assert line.startswith("convmon: error: --at") and words in line


# ------------------------------------------------------------------ naive times on a clock change
def test_a_naive_time_the_zone_skips_or_has_twice_is_refused():
    """Europe/Berlin in 2026: 02:00-03:00 skipped on 29 March, 02:00-03:00 twice on
    25 October (EU summer-time rule, Directive 2000/84/EC, art. 2-3: the change is at
    01:00 UTC)."""
    with pytest.raises(ValueError, match="does not exist in Europe/Berlin"):
        parse_time("2026-03-29T02:30", "Europe/Berlin")
    with pytest.raises(ValueError, match=r"happens twice.*\+02:00 or .*\+01:00"):
        parse_time("2026-10-25T02:30", "Europe/Berlin")
    first = parse_time("2026-10-25T02:30+02:00", "Europe/Berlin")
    second = parse_time("2026-10-25T02:30+01:00", "Europe/Berlin")
    assert second - first == 3600.0
    assert first == datetime(2026, 10, 25, 0, 30, tzinfo=UTC).timestamp()
    assert parse_time("2026-10-25T03:30", "Europe/Berlin") == second + 3600.0  # CET only
    assert parse_time("2026-10-25T02:30", "UTC") == first + 2 * 3600.0


def test_the_command_line_refuses_an_ambiguous_time(site):
    r = _estimate(site, "B-2", "--at", "2026-10-25T02:30")
    assert r.exit_code == 2 and "happens twice in Europe/Berlin" in one_error_line(r)
