"""The live monitor's poll cycle.

One cycle: read new rows -> update each running batch incrementally ->
evaluate alerts -> commit results and watermark in one transaction ->
write-back. A failing cycle changes nothing and is retried next time. The
clock is injected (``clock()`` returns epoch seconds) so tests and the demo
replay control time.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from ..batch import alert_rules
from ..batch.estimator import estimate
from ..batch.state import state_from_data
from ..config import Config
from ..errors import MonitorError
from ..historian.model import Batch
from ..historian.reader import HistorianReader
from ..outputs.documents import estimate_record
from ..outputs.writeback import WriteBack
from ..store import Store
from .golden_watch import GoldenWatch, band_summary
from .sources import Sources

log = logging.getLogger(__name__)


@dataclass
class CycleReport:
    rows_read: int = 0
    running: int = 0
    estimates_added: int = 0
    alerts_added: int = 0
    completed: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)


class Monitor:
    """In-memory batch states between cycles; rebuilt from store and historian on start."""

    def __init__(
        self,
        cfg: Config,
        *,
        clock: Callable[[], float] = time.time,
        reader=None,
        store: Store | None = None,
        writer=None,
    ):
        self.sources = Sources(cfg)
        self.clock = clock
        self._own_reader = reader is None
        self.reader = reader or HistorianReader(cfg)
        self.store = store or Store(cfg.store.url)
        self.writer = writer
        if writer is None and cfg.writeback.enabled:
            self.writer = WriteBack(cfg.writeback)
        self._wb_backlog: list = []
        self._last_estimate: dict = {}
        self.states: dict = {}
        self._basis: dict = {}  # batch -> (kinetics version, config version) of its state
        self.watermark = self.store.load_watermark()
        self._open_alerts = {(a["batch"], a["kind"]): a for a in self.store.open_alerts()}
        self._store_running = set(self.store.running_batches())
        self.golden = GoldenWatch(self.store, cfg.estimator)
        self._unmonitored: set[str] = set()  # batches already reported as not configured

    @property
    def cfg(self) -> Config:
        """The configuration in use (re-read when its file changes: `Sources`)."""
        return self.sources.cfg

    @property
    def settings(self):
        return self.cfg.estimator

    @property
    def _stale_after_s(self) -> float:
        """Data older than this (by the injected clock) is stale: a gap, or the feed stopped."""
        return max(self.cfg.estimator.max_gap_s, 3.0 * self.cfg.poll.interval_s)

    def _follow_sources(self) -> None:
        """Changed configuration or kinetics files take effect: each batch whose state was
        built with other kinetics or configuration is rebuilt from the historian and
        re-estimated in this cycle, even without new data (#10)."""
        old_units = self.cfg.units
        if self.sources.refresh():
            self.golden.settings = self.cfg.estimator
            if self._own_reader and self.cfg.units != old_units:
                self.reader.close()  # its tag-to-unit map is the old one
                self.reader = HistorianReader(self.cfg)
        for batch, state in list(self.states.items()):
            try:
                now = self.sources.basis(state.recipe.name, state.unit)
            except MonitorError:  # recipe no longer configured: `_start_batch` says so
                now = None
            if now != self._basis.get(batch):
                del self.states[batch]
                self._last_estimate.pop(batch, None)
                self._basis.pop(batch, None)
                self.golden.forget(batch)  # its past was worked out with the old model

    def _start_batch(self, b: Batch, until_s: float | None = None):
        if self.cfg.recipe(b.recipe) is None or self.cfg.unit(b.unit) is None:
            if b.batch not in self._unmonitored:  # once, not on every cycle
                self._unmonitored.add(b.batch)
                log.warning(
                    "batch %s: recipe %s or unit %s not configured; not monitored",
                    b.batch,
                    b.recipe,
                    b.unit,
                )
            return None
        data = self.reader.read_batch(b, until_s=until_s)
        state = state_from_data(data, self.sources.model(b.recipe), self.cfg.estimator.max_gap_s)
        self.states[b.batch] = state
        self._basis[b.batch] = self.sources.basis(b.recipe, b.unit)
        return state

    def cycle(self) -> CycleReport:
        """One poll cycle; raises on failure (nothing is committed then)."""
        rep = CycleReport()
        now = self.clock()
        t0 = time.perf_counter()
        self._follow_sources()
        if self.watermark is None:
            running = [b for b in self.reader.batches()[0] if b.end_s is None]
            since = min((b.start_s for b in running), default=now)
            self.watermark = self.reader.initial_watermark(since)
        poll = self.reader.poll(self.watermark)
        rep.rows_read = poll.rows_read
        batches, _problems = self.reader.batches()
        self.golden.refresh()  # a new or rebuilt profile applies from this cycle on
        t_read = time.perf_counter()
        batch_rows, est_rows, kin_rows, changes, wb_items = [], [], [], [], []
        by_unit: dict = {}
        for b in batches:
            if b.batch not in self.states:
                # a past batch is not monitored, unless the store still has it running
                # (it ended while the monitor was down: it gets its final estimate)
                if b.end_s is not None and b.batch not in self._store_running:
                    continue
                if self._start_batch(b) is None:
                    continue
            by_unit.setdefault(b.unit, []).append(b)
            batch_rows.append(
                {
                    "batch": b.batch,
                    "unit": b.unit,
                    "recipe": b.recipe,
                    "start_s": b.start_s,
                    "end_s": b.end_s,
                    "state": b.state,
                }
            )
        for tag, samples in poll.samples.items():
            role_unit = self.reader.role_of(tag)
            if role_unit is None or not len(samples):
                continue
            role, unit = role_unit
            for b in by_unit.get(unit.name, []):
                st = self.states[b.batch]
                st.end_s = b.end_s
                if role == "temperature":
                    st.add_temperature(samples.t_s, samples.value)
                elif role == "assay":
                    st.add_assays(samples.t_s, samples.value)
        last_data = None
        for bs in by_unit.values():
            for b in bs:
                st = self.states[b.batch]
                if len(st.trace) == 0:  # no good temperature yet: nothing to estimate
                    if b.end_s is not None:
                        rep.completed.append(b.batch)
                    continue
                at = float(st.trace.last_t_s)
                if b.end_s is not None:
                    at = min(at, b.end_s)
                last_data = at if last_data is None else max(last_data, at)
                key = (at, b.end_s, st.assay_t_s.tobytes(), st.assay_value.tobytes())
                previous = self._last_estimate.get(b.batch)
                if previous is not None and previous[0] == key:
                    # nothing new for this batch: the same estimate; staleness can change,
                    # and the golden rules are judged against the profile of this cycle
                    changes.extend(self._alerts(b, st, previous[1], key, now)[0])
                    continue
                rc = self.cfg.recipe(b.recipe)
                est = estimate(st, at, self.settings, safety=rc.safety)
                est.config_version = self._basis[b.batch][1]
                self._last_estimate[b.batch] = (key, est)
                found, golden = self._alerts(b, st, est, key, now)
                changes.extend(found)
                est_rows.append(estimate_record(est, golden=golden, computed_s=now))
                wb_items.append((b.unit, est_rows[-1]))
                kin_rows.append(
                    {
                        "version": st.kinetics.version,
                        "recipe": b.recipe,
                        "source": st.kinetics.source,
                        "first_used_s": at,
                    }
                )
                if b.end_s is not None:
                    rep.completed.append(b.batch)
        rep.running = sum(1 for b in batches if b.end_s is None and b.batch in self.states)
        t_est = time.perf_counter()
        added = self.store.commit_cycle(
            watermark=poll.watermark,
            batch_rows=batch_rows,
            estimate_rows=est_rows,
            alert_changes=changes,
            kinetics_rows=kin_rows,
            now_s=now,
            last_data_s=last_data,
        )
        t_commit = time.perf_counter()
        self.watermark = poll.watermark
        for b in rep.completed:
            self.states.pop(b, None)
            self._last_estimate.pop(b, None)
            self.golden.forget(b)
            self._basis.pop(b, None)
            self._store_running.discard(b)
        self._store_running.update(r["batch"] for r in batch_rows if r["state"] == "running")
        if self.writer is not None:
            pending = self._wb_backlog + wb_items
            try:
                self.writer.write(pending)
                self._wb_backlog = []
            except MonitorError as exc:  # results are safe in the store; retried next cycle
                log.warning(
                    "write-back failed (%d rows kept for the next cycle): %s", len(pending), exc
                )
                self._wb_backlog = pending[-10_000:]
        rep.estimates_added, rep.alerts_added = added["estimates"], added["alerts"]
        rep.timings = {
            "read_s": t_read - t0,
            "estimate_s": t_est - t_read,
            "commit_s": t_commit - t_est,
        }
        return rep

    def _alerts(self, b: Batch, st, est, key, now: float) -> tuple[list[dict], dict | None]:
        """Raise or clear the alert kinds the estimate and the recipe's golden profile show
        (advisory); also how far the batch is from the golden band (None: no profile)."""
        open_ids = {
            kind: row.get("id")
            for (batch, kind), row in self._open_alerts.items()
            if batch == b.batch
        }
        unit = self.cfg.unit(b.unit)
        golden = self.golden.golden_input(
            st, est.at_s, key, open_ids, unit.temperature_unit if unit else "degC"
        )
        conditions = alert_rules.evaluate(
            est,
            running=b.end_s is None,
            now_s=now,
            stale_after_s=self._stale_after_s,
            golden=golden,
        )
        changes = alert_rules.alert_changes(b.batch, conditions, open_ids, est.at_s)
        for c in changes:
            if c["op"] == "raise":
                self._open_alerts[(b.batch, c["kind"])] = c
            else:
                self._open_alerts = {
                    k: v for k, v in self._open_alerts.items() if v.get("id") != c["id"]
                }
        return changes, (band_summary(golden, conditions) if golden is not None else None)

    def refresh_alert_ids(self) -> None:
        self._open_alerts = {(a["batch"], a["kind"]): a for a in self.store.open_alerts()}

    def run_cycle_safely(self) -> CycleReport | None:
        """A cycle for the scheduler: failures are logged, state is rebuilt next time."""
        try:
            rep = self.cycle()
            self.refresh_alert_ids()
            log.info(
                "cycle: %d rows, %d running, %d estimates",
                rep.rows_read,
                rep.running,
                rep.estimates_added,
            )
            return rep
        except MonitorError as exc:
            log.warning("cycle failed, retried next time: %s", exc)
        except Exception:  # a bad row or bug must not stop the service
            log.exception("cycle failed, retried next time")
        self.store.record_failure(self.clock(), "cycle failed")
        # nothing was committed: forget in-memory progress so the next cycle rebuilds
        self.states.clear()
        self._last_estimate.clear()
        self.golden.clear()
        self._basis.clear()
        self.watermark = self.store.load_watermark()
        self._store_running = set(self.store.running_batches())
        self.refresh_alert_ids()
        return None
