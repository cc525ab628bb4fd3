"""``gapwatch run``: the always-on service.

One APScheduler job per comparison fires on its ``every`` (an interval or a
cron expression); each tick claims the comparison in the store, takes one
look with ``as_of = clock()``, logs one line and releases the claim. A second
job delivers pending alerts every few seconds. Everything a tick does is a
fresh short store transaction, so a store or source that goes away only
costs the ticks while it is away: the service logs, backs off and carries on.

Stopping (SIGINT/SIGTERM or ``stop_event``) waits for the running looks to
finish; a look interrupted harder than that never commits, because a look is
one transaction. The configuration is re-read on SIGHUP and whenever the
file's modification time changes (checked every ``service.config_poll``);
a new file that does not validate is refused and the running one kept.
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import time
import traceback
from datetime import datetime, timedelta, timezone
from pathlib import Path
from zoneinfo import ZoneInfo

import sqlalchemy as sa
from apscheduler.executors.pool import ThreadPoolExecutor
from apscheduler.schedulers.background import BackgroundScheduler
from apscheduler.triggers.cron import CronTrigger
from apscheduler.triggers.interval import IntervalTrigger
from sqlalchemy.exc import DBAPIError, OperationalError

from ..alerts import (
    build_channels,
    deliver_pending,
    record_source_recovered,
    record_source_unreachable,
    redact,
    source_backoff_until,
)
from ..calendar import GRID_EPOCH, grid_tick, next_grid_tick
from ..config import load_config
from ..look import LookMemory, take_look
from ..source.reader import Source
from ..store.claims import claim, make_holder
from ..store.engine import ensure_current, make_engine
from ..store.workers import beat, last_check, record_check, worker_stopped
from ..errors import (
    AsOfBeforeLastLookError,
    ClaimHeldError,
    ConfigError,
    DesignChangedError,
    GapwatchError,
    InvalidArgumentError,
    LookAlreadyRecordedError,
    SourceSchemaError,
    SourceUnavailableError,
    StoreBehindError,
    StoreUnavailableError,
)

__all__ = ["Service", "run_service", "run_once", "wall_clock", "DELIVERY_EVERY_SECONDS"]

log = logging.getLogger("gapwatch.service")

# How often pending alerts are looked for.
DELIVERY_EVERY_SECONDS = 2.0
# Schedules without a fixed interval (cron) back off from this first wait.
CRON_FIRST_BACKOFF_SECONDS = 60.0
# While the store is unreachable at start-up, try again this often.
STORE_RETRY_SECONDS = 5.0
# How often a worker writes its heartbeat to the store.
HEARTBEAT_SECONDS = 5.0
# The executor of the heartbeat and alert-delivery jobs (never queued behind looks).
HOUSEKEEPING = "housekeeping"
# The look memory holds at least this many entries of each kind (more with more comparisons).
MEMORY_MIN_SIZE = 256
# A tick may fire this much before the schedule's time and still count as due (a share of
# the interval, capped): timer and claim jitter must not make a lone worker skip every other tick.
DUE_SLACK_SHARE = 0.1
DUE_SLACK_CAP_SECONDS = 5.0

_FAILED_OUTCOMES = ("source_failed", "store_unavailable", "design_changed", "error")


def wall_clock() -> datetime:
    """The real time, aware UTC."""
    return datetime.now(timezone.utc)


def _secrets_of(config) -> tuple[str, ...]:
    """Every secret a configuration holds: channel keys and passwords, database passwords."""
    found = []
    for channel in (config.channels or {}).values():
        for key, value in dict(channel.options or {}).items():
            if key in ("secret", "password", "token") and value:
                found.append(str(value))
    urls = [config.store_url] + [s.url for s in (config.sources or {}).values()]
    for url in urls:
        try:
            password = sa.engine.make_url(url).password
        except Exception:  # noqa: BLE001 - a URL we cannot parse has no password we can find
            password = None
        if password:
            found.append(str(password))
    # Longest first, so a secret containing another is hidden whole.
    return tuple(sorted(set(found), key=len, reverse=True))


class _RedactingFilter(logging.Filter):
    """Rewrites every record passing a handler so no configured secret reaches the output."""

    def __init__(self):
        super().__init__("gapwatch-redact")
        self.secrets: tuple[str, ...] = ()

    def filter(self, record):
        try:
            message = record.getMessage()
        except Exception:  # noqa: BLE001 - a broken record is the logging module's business
            return True
        clean = redact(message, self.secrets)
        if clean != message:
            record.msg, record.args = clean, ()
        if record.exc_info and self.secrets:
            record.exc_text = redact("".join(traceback.format_exception(*record.exc_info)), self.secrets).rstrip()
            record.exc_info = None
        return True


class _GridTrigger(IntervalTrigger):
    """An interval trigger whose every fire time is a tick of the shared grid, even after a first
    look that ran at once (off the grid)."""

    def __init__(self, seconds: float, offset: float):
        super().__init__(seconds=seconds, start_date=GRID_EPOCH + timedelta(seconds=offset), timezone=timezone.utc)
        self.every, self.offset = seconds, offset

    def get_next_fire_time(self, previous_fire_time, now):
        if previous_fire_time is None:
            return super().get_next_fire_time(None, now)
        return next_grid_tick(self.every, self.offset, previous_fire_time + timedelta(microseconds=1))


def _trigger_for(comparison, offset: float = 0.0):
    schedule = comparison.schedule
    if isinstance(schedule, (int, float)):
        return _GridTrigger(float(schedule), offset)
    return CronTrigger.from_crontab(schedule, timezone=ZoneInfo(comparison.timezone or "UTC"))


def _first_backoff(comparison) -> float:
    schedule = comparison.schedule
    return float(schedule) if isinstance(schedule, (int, float)) else CRON_FIRST_BACKOFF_SECONDS


def _misfire_grace(comparison) -> int:
    schedule = comparison.schedule
    if isinstance(schedule, (int, float)):
        # A tick late by up to half an interval still runs; later ones are coalesced.
        return max(1, int(schedule / 2))
    return 60


def due_slack(comparison) -> float:
    """Seconds by which a tick may come early and still be due."""
    return min(DUE_SLACK_SHARE * _first_backoff(comparison), DUE_SLACK_CAP_SECONDS)


def is_due(comparison, last_checked, now, offset: float = 0.0) -> bool:
    """Whether ``comparison`` is due at wall time ``now``, given when any worker last checked it.

    An interval schedule is due ``every`` after the last check, and also once a tick of its
    grid (``offset``: its place in a spread-out schedule) has passed since the last check, at
    least half an interval ago: a look that started late does not make the next tick skip.
    A cron schedule is due once one of its times has passed since the last check. Never
    checked: due.
    """
    if last_checked is None:
        return True
    slack = due_slack(comparison)
    schedule = comparison.schedule
    if isinstance(schedule, (int, float)):
        every = float(schedule)
        gap = (now - last_checked).total_seconds()
        if gap >= every - slack:
            return True
        tick = grid_tick(every, offset, now + timedelta(seconds=slack))
        return gap >= every / 2 and (tick - last_checked).total_seconds() > slack
    following = _trigger_for(comparison).get_next_fire_time(None, last_checked)
    return following is not None and (following - now).total_seconds() <= slack


def _schedule_key(comparison):
    return (comparison.every, comparison.timezone)


def _record_field(record, *names):
    for name in names:
        if isinstance(record, dict) and name in record:
            return record[name]
        if hasattr(record, name):
            return getattr(record, name)
    return None


class Service:
    """The running service: configuration, store, sources, channels and the scheduler.

    ``clock`` gives the "now" of every look and alert; claims always use the
    real time, since they guard against real workers dying.
    """

    def __init__(self, config_path=None, *, clock=None, holder=None, stop_event=None):
        self.config_path = Path(config_path) if config_path is not None else None
        self.clock = clock or wall_clock
        self.holder = holder or make_holder()
        self.stop_event = stop_event if stop_event is not None else threading.Event()
        self.reload_requested = threading.Event()
        self.config = None
        self.engine = None
        self.sources: dict = {}
        self._source_urls: dict = {}
        self.channels: dict = {}
        self.scheduler = None
        self._lock = threading.RLock()
        self._file_stamp = None
        self._reported: dict = {}
        self.redactor = _RedactingFilter()
        # What this process keeps between its looks (cells, boundaries): one for all its threads,
        # sized to the comparisons it runs once the configuration is read (see _size_memory).
        self.memory = LookMemory()
        self._memory_size = None
        self.started_at = wall_clock()
        self._looked_at = None
        # Each interval comparison's place on its schedule's grid (Config.places), seconds.
        self._offsets: dict = {}
        # Comparisons this worker is looking at now (one thread each).
        self._looking: set = set()

    # ------------------------------------------------------------------ set-up

    def _file_state(self):
        path = self.config.path if self.config is not None else self.config_path
        try:
            st = os.stat(path)
        except (OSError, TypeError):
            return None
        return (st.st_mtime_ns, st.st_size)

    def load(self):
        """Read and validate the configuration; build sources and channels. Raises ConfigError."""
        config = load_config(self.config_path)
        if self.config_path is None:
            self.config_path = Path(config.path)
        channels = build_channels(config.channels, Path(config.path).parent)
        sources = self._build_sources(config, {})
        with self._lock:
            self.config, self.channels, self.sources = config, channels, sources
            self._source_urls = {n: sc.url for n, sc in config.sources.items()}
            self.redactor.secrets = _secrets_of(config)
        self._file_stamp = self._file_state()
        self._size_memory(config)
        return config

    def _size_memory(self, config):
        """Keep room in the look memory for every comparison the service runs.

        The memory drops its oldest entry when full; one smaller than the number of
        comparisons would lose every comparison's cells and boundary before its next tick, so
        each look would read its cells back and resume its boundary from all its testing looks,
        a cost that grows with every look. Twice the count leaves room for the entries of a
        reloaded configuration's new objects while the old ones age out. A memory that is
        already big enough is kept (with what it holds).
        """
        wanted = max(MEMORY_MIN_SIZE, 2 * len(config.comparisons))
        if self._memory_size is None or wanted > self._memory_size:
            self.memory = LookMemory(wanted)
            self._memory_size = wanted

    def _build_sources(self, config, current):
        # Keep the open Source of every source whose address did not change.
        sources = {}
        for name, source_config in config.sources.items():
            old = current.get(name)
            if old is not None and self._source_urls.get(name) == source_config.url:
                sources[name] = old
            else:
                sources[name] = Source(source_config.url, name=name)
        return sources

    def open_store(self, *, wait: bool):
        """Connect to the store and refuse one whose schema is not current.

        With ``wait`` an unreachable store is retried until it answers or the
        service is asked to stop; a store that is behind raises StoreBehindError.
        """
        engine = make_engine(self.config.store_url)
        while True:
            try:
                ensure_current(engine)
                break
            except StoreBehindError:
                engine.dispose()
                raise
            except (StoreUnavailableError, OperationalError, DBAPIError) as exc:
                if not wait:
                    engine.dispose()
                    raise StoreUnavailableError(redact(f"cannot reach the history store: {exc}",
                                                       self.redactor.secrets)) from None
                log.error("store unavailable, retrying in %.0fs: %s", STORE_RETRY_SECONDS,
                          redact(exc, self.redactor.secrets))
                if self.stop_event.wait(STORE_RETRY_SECONDS):
                    engine.dispose()
                    raise StoreUnavailableError("stopped while waiting for the history store") from None
        self.engine = engine
        return engine

    # ------------------------------------------------------------------ one look

    def _report_once(self, name, key, level, message, *args):
        """Log a repeating condition once per comparison until it changes."""
        if self._reported.get(name) == key:
            log.debug(message, *args)
            return
        self._reported[name] = key
        log.log(level, message, *args)

    def look_once(self, name: str, *, honour_backoff: bool = True) -> str:
        """One tick for comparison ``name``: claim, look, log, release. Returns the outcome.

        A worker's claim is its own to renew, so the worker itself keeps two of its threads from
        looking at one comparison at once (the second returns ``held``).
        """
        with self._lock:
            if name in self._looking:
                return "held"
            self._looking.add(name)
        try:
            return self._look_once(name, honour_backoff=honour_backoff)
        finally:
            with self._lock:
                self._looking.discard(name)

    def _look_once(self, name: str, *, honour_backoff: bool = True) -> str:
        """The tick itself (:meth:`look_once`).

        With ``honour_backoff`` (every scheduled tick) a comparison is looked at only when it
        is due by the store's record of its last check, whichever worker took it; ``--once``
        looks regardless.

        Outcomes: recorded, quiet, stopped, held, not_due, backoff, as_of_behind, duplicate, removed,
        source_failed, store_unavailable, design_changed, error. Never raises.
        """
        with self._lock:
            config, sources = self.config, self.sources
        comparison = next((c for c in config.comparisons if c.name == name), None)
        if comparison is None:
            return "removed"
        service = config.service
        started = self.clock()
        try:
            if honour_backoff:
                until = source_backoff_until(self.engine, name, first=_first_backoff(comparison),
                                             cap=service.retry_max_backoff)
                # A tick that fires a hair early still counts as due.
                slack = 0.1 * _first_backoff(comparison)
                if until is not None and (until - started).total_seconds() > slack:
                    log.debug("look skipped comparison=%s reason=source_backoff until=%s", name, until.isoformat())
                    return "backoff"
            with claim(self.engine, name, self.holder, now=wall_clock(), seconds=service.lease_seconds,
                       renew_clock=wall_clock):
                checked_at = wall_clock()
                if honour_backoff:
                    previous = last_check(self.engine, name)
                    if not is_due(comparison, previous and previous["checked_at"], checked_at,
                                  self._offsets.get(name, 0.0)):
                        log.debug("look skipped comparison=%s reason=not_due", name)
                        return "not_due"
                as_of = self.clock()
                began = time.perf_counter()
                # holder=None: the claim is ours already (take_look would claim again).
                record = take_look(config, comparison, as_of=as_of, engine=self.engine,
                                   source=sources.get(comparison.source), holder=None, memory=self.memory,
                                   checked_at=checked_at, checked_by=self.holder)
                duration_ms = (time.perf_counter() - began) * 1000.0
                quiet = getattr(record, "quiet", False)
                if not quiet:  # a quiet look recorded its own check
                    # Still under the claim, so the next worker to win it sees this check.
                    record_check(self.engine, name, checked_at=checked_at, as_of=as_of, holder=self.holder,
                                 outcome="recorded" if record is not None else "stopped",
                                 detail={} if record is None else {"look": _record_field(record, "look")})
                self._looked_at = checked_at
        except ClaimHeldError:
            log.debug("look skipped comparison=%s reason=claimed_by_another_worker", name)
            return "held"
        except (SourceUnavailableError, SourceSchemaError) as exc:
            message = redact(exc, self.redactor.secrets)
            log.warning("look failed comparison=%s reason=source error=%s", name, message)
            try:
                alert_id = record_source_unreachable(
                    self.engine, name, message, now=started, alert_after=service.unreachable_alert_after,
                    notify=comparison.notify, secrets=self.redactor.secrets)
                if alert_id:
                    log.warning("source unreachable comparison=%s alert_id=%s", name, alert_id)
            except (OperationalError, DBAPIError, StoreUnavailableError) as store_exc:
                log.error("store unavailable comparison=%s error=%s", name, redact(store_exc, self.redactor.secrets))
            return "source_failed"
        except LookAlreadyRecordedError as exc:
            log.info("look skipped comparison=%s reason=already_recorded detail=%s", name, exc)
            return "duplicate"
        except DesignChangedError as exc:
            self._report_once(name, ("design", str(exc)), logging.ERROR,
                              "look refused comparison=%s reason=design_changed error=%s", name, exc)
            return "design_changed"
        except AsOfBeforeLastLookError as exc:
            # The clock went back (or another worker's runs ahead): wait until it passes the last look.
            self._report_once(name, ("as_of", "behind"), logging.WARNING,
                              "look refused comparison=%s reason=as_of_before_last_look error=%s", name, exc)
            return "as_of_behind"
        except StoreBehindError as exc:
            log.error("look refused comparison=%s reason=store_behind error=%s", name, exc)
            return "store_unavailable"
        except (OperationalError, DBAPIError, StoreUnavailableError) as exc:
            log.error("look failed comparison=%s reason=store_unavailable error=%s", name,
                      redact(getattr(exc, "orig", None) or exc, self.redactor.secrets))
            return "store_unavailable"
        except Exception as exc:  # noqa: BLE001 - one comparison's bug must not stop the others
            log.exception("look failed comparison=%s reason=unexpected error=%s", name,
                          redact(f"{type(exc).__name__}: {exc}", self.redactor.secrets))
            return "error"

        if record is None:
            self._report_once(name, "stopped", logging.INFO,
                              "look skipped comparison=%s reason=comparison_stopped", name)
            return "stopped"
        self._reported.pop(name, None)
        if quiet:
            log.info("look quiet comparison=%s version=%s stands_at_look=%s nothing_new_to=%s as_of=%s",
                     name, record.version, record.look, record.cutoff.isoformat(), as_of.isoformat())
        else:
            log.info(
                "look comparison=%s version=%s look=%s decision=%s n1=%s n2=%s as_of=%s duration_ms=%.1f",
                name, _record_field(record, "version"), _record_field(record, "look_number", "look"),
                _record_field(record, "decision"), _record_field(record, "n1"), _record_field(record, "n2"),
                as_of.isoformat(), duration_ms,
            )
        try:
            record_source_recovered(self.engine, name, now=as_of, notify=comparison.notify)
        except (OperationalError, DBAPIError) as exc:
            log.error("store unavailable comparison=%s error=%s", name, redact(exc, self.redactor.secrets))
        return "quiet" if quiet else "recorded"

    def deliver(self) -> int:
        """Deliver due alerts once; never raises."""
        with self._lock:
            config, channels = self.config, self.channels
        try:
            return deliver_pending(self.engine, channels, now=self.clock(),
                                   max_attempts=config.service.alert_max_attempts,
                                   max_backoff=config.service.retry_max_backoff)
        except (OperationalError, DBAPIError, StoreUnavailableError) as exc:
            log.error("alert delivery paused reason=store_unavailable error=%s", redact(exc, self.redactor.secrets))
        except Exception as exc:  # noqa: BLE001 - delivery must never kill the loop
            log.exception("alert delivery failed reason=unexpected error=%s",
                          redact(f"{type(exc).__name__}: {exc}", self.redactor.secrets))
        return 0

    def heartbeat(self) -> None:
        """Tell the store this worker is alive (and when it last looked); never raises."""
        try:
            beat(self.engine, self.holder, now=wall_clock(), started_at=self.started_at,
                 looked_at=self._looked_at)
        except Exception as exc:  # noqa: BLE001 - a missed beat only makes the worker look older
            log.warning("heartbeat not written error=%s", redact(f"{type(exc).__name__}: {exc}",
                                                                 self.redactor.secrets))

    # ------------------------------------------------------------------ scheduling

    def _add_look_job(self, comparison, *, at_once: bool):
        """Schedule ``comparison``'s ticks on its grid; ``at_once``: the first of them now (an
        interval comparison not placed in a spread-out start). One job per comparison, so one
        worker never looks at a comparison twice at once."""
        extra = {}
        if at_once and isinstance(comparison.schedule, (int, float)) and self._offsets.get(comparison.name, 0.0) == 0.0:
            extra["next_run_time"] = datetime.now(timezone.utc)
        self.scheduler.add_job(
            self.look_once, _trigger_for(comparison, self._offsets.get(comparison.name, 0.0)),
            args=[comparison.name], id=f"look:{comparison.name}", name=f"look at {comparison.name}",
            coalesce=True, max_instances=1, misfire_grace_time=_misfire_grace(comparison),
            replace_existing=True, **extra,
        )

    def start_scheduler(self):
        workers = max(4, min(10, len(self.config.comparisons) + 2))
        # Heartbeats and alert delivery get threads of their own: with many comparisons due at
        # once every look thread is busy, and a heartbeat waiting behind the looks would make a
        # busy worker look dead.
        self.scheduler = BackgroundScheduler(
            executors={"default": ThreadPoolExecutor(workers), HOUSEKEEPING: ThreadPoolExecutor(2)},
            timezone=timezone.utc, job_defaults={"coalesce": True, "max_instances": 1},
        )
        self._offsets = self.config.places
        for comparison in self.config.comparisons:
            self._add_look_job(comparison, at_once=True)
        self.scheduler.add_job(
            self.deliver, "interval", seconds=DELIVERY_EVERY_SECONDS, id="deliver-alerts", executor=HOUSEKEEPING,
            name="deliver pending alerts", coalesce=True, max_instances=1, misfire_grace_time=5,
            next_run_time=datetime.now(timezone.utc),
        )
        self.scheduler.add_job(
            self.heartbeat, "interval", seconds=HEARTBEAT_SECONDS, id="heartbeat", executor=HOUSEKEEPING,
            name="worker heartbeat", coalesce=True, max_instances=1, misfire_grace_time=5,
            next_run_time=datetime.now(timezone.utc),
        )
        self.scheduler.start()
        log.info("service started holder=%s comparisons=%s", self.holder,
                 ",".join(c.name for c in self.config.comparisons) or "-")

    def reload(self, reason: str) -> bool:
        """Adopt the configuration file as it is now, or keep the running one if it is invalid."""
        self._file_stamp = self._file_state()
        try:
            new = load_config(self.config_path)
            if new.store_url != self.config.store_url:
                raise ConfigError(["[store] url changed; restart the service to move to another store"],
                                  path=new.path)
            channels = build_channels(new.channels, Path(new.path).parent)
            sources = self._build_sources(new, self.sources)
        except (ConfigError, InvalidArgumentError, OSError, GapwatchError) as exc:
            log.error("configuration refused (%s); the running configuration is kept: %s", reason,
                      redact(str(exc).replace("\n", "; "), self.redactor.secrets))
            return False
        with self._lock:
            old = self.config
            old_sources = self.sources
            self.config, self.channels, self.sources = new, channels, sources
            self._size_memory(new)
            self._source_urls = {n: sc.url for n, sc in new.sources.items()}
            self.redactor.secrets = tuple(sorted(set(self.redactor.secrets) | set(_secrets_of(new)),
                                                 key=len, reverse=True))
        for name, source in old_sources.items():
            if sources.get(name) is not source:
                source.dispose()
        before = {c.name: c for c in old.comparisons}
        after = {c.name: c for c in new.comparisons}
        added = [n for n in after if n not in before]
        removed = [n for n in before if n not in after]
        rescheduled = [n for n in after if n in before and _schedule_key(after[n]) != _schedule_key(before[n])]
        offsets, self._offsets = self._offsets, new.places
        # Comparisons whose place on the grid moved (more or fewer on their schedule) keep ticking, there.
        moved = [n for n in after if n in before and n not in rescheduled
                 and offsets.get(n, 0.0) != self._offsets.get(n, 0.0)]
        if self.scheduler is not None:
            for name in removed:
                try:
                    self.scheduler.remove_job(f"look:{name}")
                except Exception:  # noqa: BLE001 - already gone
                    pass
            for name in added + rescheduled:
                self._add_look_job(after[name], at_once=True)
            for name in moved:
                self._add_look_job(after[name], at_once=False)
        self._reported.clear()
        log.info("configuration reloaded (%s) added=%s removed=%s rescheduled=%s", reason,
                 ",".join(added) or "-", ",".join(removed) or "-", ",".join(rescheduled) or "-")
        return True

    def serve(self):
        """Block until asked to stop, reloading the configuration when told or when the file changes."""
        next_poll = time.monotonic() + self.config.service.config_poll
        while not self.stop_event.wait(0.2):
            if self.reload_requested.is_set():
                self.reload_requested.clear()
                self.reload("SIGHUP")
                next_poll = time.monotonic() + self.config.service.config_poll
            elif time.monotonic() >= next_poll:
                stamp = self._file_state()
                if stamp is not None and stamp != self._file_stamp:
                    self.reload("file changed")
                next_poll = time.monotonic() + self.config.service.config_poll

    def shutdown(self):
        if self.scheduler is not None:
            log.info("service stopping: waiting for running looks to finish")
            self.scheduler.shutdown(wait=True)
            self.scheduler = None
            if self.engine is not None:
                try:
                    worker_stopped(self.engine, self.holder, now=wall_clock())
                except Exception:  # noqa: BLE001 - the heartbeat simply ages
                    pass
        for source in self.sources.values():
            try:
                source.dispose()
            except Exception:  # noqa: BLE001
                pass
        if self.engine is not None:
            self.engine.dispose()
        log.info("service stopped holder=%s", self.holder)


# Loggers whose handlers get the redacting filter (the root, and ours if a caller gave them handlers).
_REDACTED_LOGGERS = ("", "gapwatch", "apscheduler", "sqlalchemy", "alembic")


def _install_redactor(service):
    handlers = []
    for name in _REDACTED_LOGGERS:
        for handler in logging.getLogger(name).handlers:
            if handler not in handlers:
                handler.addFilter(service.redactor)
                handlers.append(handler)
    return handlers


def _remove_redactor(service, handlers):
    for handler in handlers:
        handler.removeFilter(service.redactor)


def run_service(config_path=None, *, stop_event=None, clock=None, holder=None) -> int:
    """Run the service until ``stop_event`` is set (or SIGINT/SIGTERM). Blocking.

    Parameters
    ----------
    config_path : path-like, optional
        The TOML file (default: ``$GAPWATCH_CONFIG``, else ``./gapwatch.toml``).
    stop_event : threading.Event, optional
        Set it to stop the service cleanly (running looks finish first).
    clock : callable, optional
        Returns the aware-UTC "now" used as every look's ``as_of`` (and for
        alerts); the real time by default.
    holder : str, optional
        This worker's identity in claims; ``host:pid:random`` by default.

    Returns 0 after a clean stop. Raises ConfigError for an invalid file and
    StoreBehindError for a store whose schema is not current.
    """
    service = Service(config_path, clock=clock, holder=holder, stop_event=stop_event)
    handlers = _install_redactor(service)
    previous = {}
    if threading.current_thread() is threading.main_thread():
        def _stop(signum, frame):
            log.info("signal %s received: stopping", signal.Signals(signum).name)
            service.stop_event.set()

        def _hup(signum, frame):
            service.reload_requested.set()

        for signum, handler in ((signal.SIGINT, _stop), (signal.SIGTERM, _stop), (getattr(signal, "SIGHUP", None), _hup)):
            if signum is not None:
                previous[signum] = signal.signal(signum, handler)
    try:
        service.load()
        try:
            service.open_store(wait=True)
        except StoreUnavailableError:
            if service.stop_event.is_set():
                return 0
            raise
        service.start_scheduler()
        service.serve()
        return 0
    finally:
        service.shutdown()
        for signum, handler in previous.items():
            signal.signal(signum, handler)
        _remove_redactor(service, handlers)


def run_once(config_path=None, *, clock=None, holder=None) -> int:
    """One look at every comparison, then one delivery pass. Returns 0, or 1 if a look failed."""
    service = Service(config_path, clock=clock, holder=holder)
    handlers = _install_redactor(service)
    try:
        service.load()
        service.open_store(wait=False)
        outcomes = {c.name: service.look_once(c.name, honour_backoff=False) for c in service.config.comparisons}
        service.deliver()
        failed = [name for name, outcome in outcomes.items() if outcome in _FAILED_OUTCOMES]
        return 1 if failed else 0
    finally:
        service.shutdown()
        _remove_redactor(service, handlers)
