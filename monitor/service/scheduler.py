"""``convmon run``: the poll cycle on an APScheduler 3 interval job."""

from __future__ import annotations

import logging
import signal
from datetime import UTC, datetime

from apscheduler.events import EVENT_JOB_MAX_INSTANCES, EVENT_JOB_MISSED
from apscheduler.schedulers.blocking import BlockingScheduler

from ..config import Config
from ..errors import ConfigError, LockError, StoreError
from .cycle import CycleReport, Monitor
from .lock import store_lock

log = logging.getLogger(__name__)


def _check(cfg: Config) -> None:
    if cfg.poll.interval_s <= 0:
        raise ConfigError("poll.interval_s must be positive", path=cfg.path, key="poll.interval_s")


def run_once(cfg: Config) -> CycleReport:
    """``convmon run --once``: one cycle under the store's lock; raises on failure."""
    _check(cfg)
    with store_lock(cfg.store.url):
        rep = Monitor(cfg).cycle()
    log.info(
        "one cycle: %d rows read, %d running, %d estimates added",
        rep.rows_read,
        rep.running,
        rep.estimates_added,
    )
    return rep


def run_service(cfg: Config) -> None:
    """``convmon run``: APScheduler 3 interval job, one instance, clean shutdown.

    The store's lock is held for the life of the service and checked before each cycle:
    a lock that was lost (its connection dropped) and taken by another monitor stops
    this one with `LockError`, rather than two monitors writing one store.
    """
    _check(cfg)
    with store_lock(cfg.store.url) as lock:
        monitor = Monitor(cfg)
        sched = BlockingScheduler(timezone="UTC")
        lost: list[LockError] = []

        def cycle() -> None:
            try:
                lock.check()
            except LockError as exc:
                log.error("stopping: %s", exc)
                lost.append(exc)
                sched.shutdown(wait=False)
                return
            except StoreError as exc:  # the store is down: no cycle could commit anyway
                log.warning("cycle skipped: %s", exc)
                return
            monitor.run_cycle_safely()

        sched.add_job(
            cycle,
            "interval",
            seconds=cfg.poll.interval_s,
            max_instances=1,
            coalesce=True,
            misfire_grace_time=int(cfg.poll.misfire_grace_s),
            id="poll",
            next_run_time=None,
        )
        sched.modify_job("poll", next_run_time=_utcnow())
        sched.add_listener(_log_skipped, EVENT_JOB_MISSED | EVENT_JOB_MAX_INSTANCES)

        def stop(signum, _frame):
            log.warning("signal %s: stopping after the current cycle", signum)
            sched.shutdown(wait=True)

        signal.signal(signal.SIGTERM, stop)
        signal.signal(signal.SIGINT, stop)
        sched.start()
    if lost:
        raise lost[0]


def _log_skipped(event) -> None:
    """A cycle the scheduler did not run (still busy, or missed beyond the grace time)."""
    log.warning(
        "poll cycle skipped (%s) at %s",
        "previous cycle still running"
        if event.code == EVENT_JOB_MAX_INSTANCES
        else "missed its grace time",
        event.scheduled_run_time,
    )


def _utcnow():
    return datetime.now(UTC)
