"""Historian text is data (issue #10, item 7): batch ids of any Unicode, end to end.

A hypothesis property pushes arbitrary batch ids (markup such as ``[/]`` and
``[bold]``, ``../``, ``<script>``, ANSI escapes, emoji, 500 characters) through a small
generated export whose events table holds them, one poll cycle, and the commands
``batches``, ``estimate``, ``status``, ``alerts`` and ``alerts ack`` (the id as the
acknowledging name too): no crash, the id read back exactly from every JSON document,
nothing written anywhere but the store. ``fit --out`` (the file-writing command that
reads historian text) runs over all the hostile ids at once. The same commands' text
for people must not crash nor let a control character through (that rendering is the
terminal screens' work: marked xfail while it still breaks). File names and HTML built
from such text go through one helper each (`monitor.outputs.filenames`,
`monitor.outputs.html_text`), checked here by properties of their own.
"""

from __future__ import annotations

import contextlib
import json
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from monitor.config import load_config
from monitor.outputs.filenames import HASH_DIGITS, MAX_NAME, inside, safe_name
from monitor.outputs.html_text import from_html_text, html_text
from monitor.service.cycle import Monitor
from tests.cli_runner import convmon
from tests.tiny_site import last_data_s, write_site

HOSTILE = [
    "TW26-0063 [rework]",
    "[/]",
    "[bold]B-1[/bold]",
    "[link=file:///etc/passwd]B[/link]",
    "../../etc/passwd",
    "..",
    "/abs/path",
    "C:\\batch\\..\\x",
    "<script>alert('B')</script>",
    "\x1b[31mred\x1b[0m",
    "\x1b]0;title\x07",
    "line\nbreak\r\tand tab",
    "\u202eevil\u202c",
    "🧪 batch 🔥",
    "B\x00nul",
    " padded ",
    "x" * 500,
    "é" * 250 + "[/]" + "\x1b" * 3,
]
IDS = st.one_of(
    st.text(min_size=1, max_size=500),
    st.sampled_from(HOSTILE),
    st.tuples(st.sampled_from(HOSTILE), st.text(max_size=40)).map("".join),
)
#: Characters that must never reach a terminal raw: C0 controls but the newline, DEL,
#: C1 controls, bidirectional overrides and isolates, line and paragraph separators.
RAW_CONTROL = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
SLOW = settings(
    max_examples=30,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
)


def _files(root: Path) -> set[str]:
    return {str(p.relative_to(root)) for p in root.rglob("*")}


def _site(tmp_path_factory, batch_id: str) -> tuple[Path, Path]:
    """The tiny site with a complete batch and ``batch_id`` running, after one poll cycle
    two hours after its last data (so a stale-data alert is open for it)."""
    root = tmp_path_factory.mktemp("ids")
    config = write_site(root / "site", ["B-done", batch_id])
    mon = Monitor(load_config(config), clock=lambda: last_data_s(2) + 7200.0)
    mon.cycle()
    mon.store.close()
    mon.reader.close()
    (root / "cwd").mkdir()
    return root, config


def _commands(config: Path, batch_id: str, *json_flag: str) -> list[tuple[str, ...]]:
    return [
        ("batches", "--config", str(config), *json_flag),
        ("estimate", "--config", str(config), f"--batch={batch_id}", *json_flag),
        ("status", "--config", str(config), *json_flag),
        ("alerts", "--config", str(config), *json_flag),
    ]


@SLOW
@given(batch_id=IDS)
@example(batch_id="[/]")
@example(batch_id="\x1b[31mred\x1b[0m")
@example(batch_id="../../etc/passwd")
@example(batch_id="x" * 500)
def test_any_batch_id_survives_the_json_documents_exactly(tmp_path_factory, batch_id):
    if batch_id == "B-done":
        return
    root, config = _site(tmp_path_factory, batch_id)
    before = _files(root)
    with contextlib.chdir(root / "cwd"):
        docs = []
        for args in _commands(config, batch_id, "--json"):
            r = convmon(*args)
            assert r.exit_code == 0, (args[0], r.stderr)
            docs.append(json.loads(r.stdout))
        listed, est, status, alerts = docs
        assert [b["batch"] for b in listed["batches"]] == ["B-done", batch_id]
        assert est["batch"] == batch_id
        assert [s["batch"] for s in status["status"]] == [batch_id]
        (alert,) = [a for a in alerts["alerts"] if a["kind"] == "stale_data"]
        assert alert["batch"] == batch_id
        r = convmon("alerts", "ack", str(alert["id"]), f"--by={batch_id}", "--note", batch_id,
                    "--config", str(config), "--json")  # fmt: skip
        if batch_id.strip():
            assert r.exit_code == 0, r.stderr
            assert json.loads(r.stdout)["acks"][-1] == {
                "by": batch_id,
                "at": json.loads(r.stdout)["acks"][-1]["at"],
                "note": batch_id,
            }
        else:  # a name of blanks is no name
            assert r.exit_code == 2 and "Traceback" not in r.stderr
    assert _files(root) == before  # nothing written, in the site's folder or elsewhere


@pytest.mark.xfail(
    strict=True,
    reason="terminal text still interprets historian text (rich markup crashes on '[/]', "
    "escape codes reach the terminal): the terminal screens work escapes it "
    "(monitor/outputs/terminal.py, status rendering)",
)
@SLOW
@given(batch_id=IDS)
@example(batch_id="[/]")
@example(batch_id="TW26-0063 [rework]")
@example(batch_id="\x1b[31mred\x1b[0m")
def test_any_batch_id_is_shown_to_people_without_crash_or_control(tmp_path_factory, batch_id):
    if batch_id == "B-done":
        return
    root, config = _site(tmp_path_factory, batch_id)
    with contextlib.chdir(root / "cwd"):
        for args in _commands(config, batch_id):
            r = convmon(*args)
            assert r.exit_code == 0 and "Traceback" not in r.stderr, (args[0], r.stderr)
            assert not RAW_CONTROL.search(r.stdout), (args[0], r.stdout)
            if args[0] == "estimate" and batch_id.isprintable() and len(batch_id) <= 40:
                assert batch_id in r.stdout  # verbatim: "[rework]" is not markup


def test_fit_over_hostile_batch_ids_writes_only_its_files(tmp_path, monkeypatch):
    """The file-writing command that reads historian text (``fit --out``): every hostile
    id a complete batch of the history; the fit lists them exactly, the kinetics file's
    provenance reads them back exactly, and only the three named files are written."""
    ids = [*HOSTILE, "$\\frac{x}{", "a$b$c_^{}"]
    config = write_site(tmp_path / "site", [*ids, "running"])
    monkeypatch.chdir(tmp_path)
    before = _files(tmp_path)
    r = convmon("fit", "--recipe", "AX", "--out", tmp_path / "out" / "k.toml",
                "--config", config, "--json")  # fmt: skip
    assert r.exit_code == 0, r.stderr
    assert json.loads(r.stdout)["batches"] == ids
    provenance = tomllib.loads((tmp_path / "out" / "k.toml").read_text())["provenance"]
    assert provenance["batches"] == ids
    assert _files(tmp_path) - before == {"out", "out/k.toml", "out/k_parity.png",
                                         "out/k_residuals.png"}  # fmt: skip


# ------------------------------------------------------------------ the two helpers
@given(st.text(max_size=600), st.sampled_from(["", ".pdf", ".json", ".tar.gz"]))
@example("../../etc/passwd", "")
@example("..", ".pdf")
@example("", "")
def test_a_safe_name_stays_in_its_folder(tmp_path_factory, text, suffix):
    name = safe_name(text, suffix)
    assert re.fullmatch(r"[A-Za-z0-9._-]+", name)
    assert ".." not in name and not name.startswith((".", "-")) and name.endswith(suffix)
    assert len(name) <= MAX_NAME
    assert name[: -len(suffix) or None][-HASH_DIGITS - 1] == "-"
    folder = tmp_path_factory.getbasetemp()
    assert inside(folder, name).parent == folder.resolve()


@given(st.lists(st.text(max_size=80), min_size=2, max_size=20, unique=True))
@example(["TW26-0063", "tw26-0063", "TW26_0063", "TW26 0063", "TW26/0063", "TW26-0063é"])
def test_different_ids_never_share_a_file_name(ids):
    names = [safe_name(i, ".pdf").lower() for i in ids]  # even on a case-blind disk
    assert len(set(names)) == len(ids)


def test_inside_refuses_a_name_that_leaves_the_folder(tmp_path):
    for name in ("../x", "/etc/passwd", "a/../../b", "sub/x"):
        with pytest.raises(ValueError, match="would leave the folder"):
            inside(tmp_path, name)


@given(st.text(max_size=300))
@example("<script>alert('B')</script>")
@example('"><img src=x onerror=alert(1)>')
@example("\x1b[31m\u202e\\x41")
def test_html_text_is_never_markup_and_gives_the_value_back(text):
    out = html_text(text)
    assert not set(out) & set("<>\"'") and not RAW_CONTROL.search(out)
    assert re.fullmatch(r"(?:[^&]|&(?:amp|lt|gt|quot|#x27);)*", out)
    assert from_html_text(out) == text
