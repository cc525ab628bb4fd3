"""``gapwatch demo``: the invented Corvane Provisions scenario, live, in one command.

Builds the demo folder (source databases, configuration, history store),
then runs three things side by side until Ctrl-C or ``--duration``: the live
feed appending events on a simulated clock, the monitoring service taking
looks with that same clock as ``as_of``, and the dashboard (a subprocess).
"""

from __future__ import annotations

import argparse
import logging
import os
import shlex
import signal
import subprocess
import sys
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

from ..vocabulary import estimate_words, parse_duration, state_label
from . import SUMMARIES
from ._common import path_as_typed, program
from .dashboard import free_port, port_is_free

__all__ = ["register", "run", "DEFAULT_FOLDER", "DEFAULT_SPEED"]

# From the top of a checkout this is the scenario's own source folder: the demo writes its
# databases beside the generator's code and leaves the code alone (see demo_db/folder.py).
DEFAULT_FOLDER = "demo_db"
# One simulated hour per real second: a working day passes in a quarter of a minute.
DEFAULT_SPEED = 3600.0
DEFAULT_PORT = 8501
# The dashboard's address (the dashboard command's default: this machine only).
DASHBOARD_ADDRESS = "127.0.0.1"

EXPLANATION = """\
What you are watching: {company} (an invented grocery distributor) compares pairs of
sites, desks, lines and filling heads on live operational tables. A feed appends events
on a simulated clock ({speed:g} simulated seconds per real second, starting {start}); every
few real seconds each comparison takes a look at what has arrived. The dashboard shows,
per comparison, the difference so far with its confidence interval, how much of the
planned data has been seen (the information fraction) and the boundary the evidence must
cross at this look before the monitor speaks. Expect: pick-seconds to measure the new pick
path at Hollin Cross against the two weeks before it (Hollin Cross was already slower: the
baseline gap is not the change) and find it within about three simulated days; desk-first-contact to stay quiet (the desks
do not differ) and to stop with "no material difference"; fill-giveaway to use up its plan
without alarm; delivery-lateness to wait for enough days (clusters) before it judges;
returns-grading to report a data problem until bench 2 opens on Thursday; and the paired
line comparison to build its case day by day. Bad rows and late events are counted on
every look. A signal supports, never replaces, operational judgement and local rules."""


def register(subparsers):
    parser = subparsers.add_parser(
        "demo",
        help=SUMMARIES["demo"],
        description="Create the demo databases and configuration in a folder, feed them live on a "
                    "simulated clock, take looks and show them on the dashboard. Stops on Ctrl-C "
                    "or after --duration seconds. Nothing is written outside --dir.",
    )
    parser.add_argument("--dir", default=DEFAULT_FOLDER, metavar="PATH",
                        help=f"demo folder (default: ./{DEFAULT_FOLDER}); an existing demo there is resumed")
    parser.add_argument("--reset", action="store_true", help="delete the demo in --dir and start again")
    parser.add_argument("--speed", type=float, default=DEFAULT_SPEED, metavar="X",
                        help=f"simulated seconds per real second (default {DEFAULT_SPEED:g})")
    parser.add_argument("--no-dashboard", action="store_true", help="do not start the dashboard")
    parser.add_argument("--duration", type=_real_seconds, default=None, metavar="SECONDS",
                        help="stop after this many real seconds, or a duration such as 90s or 10m "
                             "(default: run until Ctrl-C)")
    parser.add_argument("--port", type=int, default=DEFAULT_PORT, metavar="P",
                        help=f"dashboard port (default {DEFAULT_PORT})")
    parser.add_argument("--seed", type=int, default=None, metavar="N",
                        help="random seed of a new demo (default: the scenario's own)")
    parser.set_defaults(func=run)


def _real_seconds(text) -> float:
    """argparse type of ``--duration``: a number of seconds, or a duration with its unit (``10m``)."""
    try:
        value = float(text)
    except ValueError:
        value = text
    try:
        return parse_duration(value)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _bad(option, value, why) -> int:
    print(f"gapwatch demo: {option} {value!r} {why}", file=sys.stderr)
    return 2


def _check(args) -> int:
    if not (args.speed > 0 and args.speed < 1e7):
        return _bad("--speed", args.speed, "must be a positive number of simulated seconds per real second (below 1e7)")
    if args.duration is not None and not args.duration > 0:
        return _bad("--duration", args.duration, "must be a positive number of seconds")
    if not 1 <= args.port <= 65535:
        return _bad("--port", args.port, "must be a TCP port between 1 and 65535")
    if args.seed is not None and args.seed < 0:
        return _bad("--seed", args.seed, "must be a non-negative integer")
    return 0


_LOGGERS = {"gapwatch": logging.INFO, "apscheduler": logging.WARNING}


def _setup_logging(log_path: Path) -> list[logging.Handler]:
    """Service, alert and scheduler logs go to the demo's log file, not the terminal.

    The terminal gets one line per change of state instead (see ``_Watcher``).
    """
    handler = logging.FileHandler(log_path, encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s %(message)s"))
    for name, level in _LOGGERS.items():
        logger = logging.getLogger(name)
        logger.setLevel(level)
        logger.addHandler(handler)
    return [handler]


def _teardown_logging(handlers):
    for name in _LOGGERS:
        logger = logging.getLogger(name)
        for handler in handlers:
            logger.removeHandler(handler)
    for handler in handlers:
        handler.close()


def _start_dashboard(config_path: Path, port: int, folder: Path):
    root = Path(__file__).resolve().parents[2]
    env = dict(os.environ)
    # Works from a checkout that is not installed, too.
    env["PYTHONPATH"] = os.pathsep.join([str(root)] + ([env["PYTHONPATH"]] if env.get("PYTHONPATH") else []))
    env["GAPWATCH_CONFIG"] = str(config_path)
    log = open(folder / "dashboard.log", "ab")
    try:
        process = subprocess.Popen(
            [sys.executable, "-m", "monitor", "dashboard", "--config", str(config_path), "--port", str(port)],
            cwd=folder, env=env, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
            # Its own process group: Ctrl-C reaches the demo, which then stops the dashboard itself.
            start_new_session=True,
        )
    finally:
        log.close()
    return process


def _stop_dashboard(process):
    """Stop the dashboard and the Streamlit server it started: its whole process group.

    The group is the one made for it at start (``start_new_session``), so
    nothing else is touched. Ctrl-C first, as a user would; harder if it lingers.
    """
    if process is None:
        return
    for sig, wait in ((signal.SIGINT, 10), (signal.SIGTERM, 5), (signal.SIGKILL, 5)):
        try:
            os.killpg(process.pid, sig)
        except ProcessLookupError:
            break
        try:
            process.wait(timeout=wait)
        except subprocess.TimeoutExpired:
            continue
        # The dashboard command has exited; give its server the same chance.
        deadline = time.monotonic() + wait
        while time.monotonic() < deadline:
            try:
                os.killpg(process.pid, 0)
            except ProcessLookupError:
                return
            time.sleep(0.2)


def _bad_rows(excluded) -> str:
    """``"bad rows 17 (null 5, out of range 12)"``; empty when nothing was excluded."""
    counts = {reason: int(count) for reason, count in (excluded or {}).items() if count}
    if not counts:
        return ""
    detail = ", ".join(f"{reason.replace('_', ' ')} {count}" for reason, count in sorted(counts.items()))
    return f"bad rows {sum(counts.values())} ({detail})"


def _describe(row, excluded=None) -> str:
    parts = [f"{row['name']}: {state_label(row['state'])}", f"look {row.get('looks')}"]
    if row.get("estimate") is not None:
        # The one number format (never an exponent), an open end "open", rates in percentage
        # points and the comparison's unit, as in status and the printed review.
        parts.append("difference " + estimate_words(row["estimate"], row.get("ci_low"), row.get("ci_high"),
                                                     metric=row.get("metric") or "mean",
                                                     unit=row.get("unit") or ""))
    if row.get("fraction") is not None:
        parts.append(f"fraction {row['fraction']:.2f}")
    bad = _bad_rows(excluded)
    if bad:
        parts.append(bad)
    return ", ".join(parts)


def _simulated(moment) -> str:
    """A simulated time as the terminal shows it, zone included."""
    return moment.astimezone(timezone.utc).strftime("%a %d %b %H:%M UTC")


class _Watcher:
    """Prints a line whenever a comparison's state changes (read from the store).

    Each line is stamped with the simulated time of the look that brought the change
    (its recorded ``as_of``) and carries the bad rows excluded so far.
    """

    def __init__(self, engine, read_status, read_history, clock):
        self.engine = engine
        self.read_status = read_status
        self.read_history = read_history
        self.clock = clock
        self.states = {}

    def _latest_look(self, name):
        history = self.read_history(self.engine, name)
        return history[-1] if history else None

    def poll(self, *, final=False):
        try:
            rows = self.read_status(self.engine, now=self.clock())
            changed = [row for row in rows if final or self.states.get(row["name"]) != row["state"]]
            latest = {row["name"]: self._latest_look(row["name"]) for row in changed}
        except Exception as exc:  # noqa: BLE001 - a busy store must not end the demo
            logging.getLogger("gapwatch.demo").info("status read failed: %s", exc)
            return []
        for row in changed:
            self.states[row["name"]] = row["state"]
            look = latest[row["name"]]
            at = datetime.fromisoformat(look["as_of"]) if look else self.clock()
            excluded = look["excluded"] if look else None
            print(f"  [{_simulated(at)}, simulated] {_describe(row, excluded)}", flush=True)
        return rows

    def close(self):
        self.engine.dispose()


def _demo_command(args) -> str:
    return f"{program()} demo" + ("" if args.dir == DEFAULT_FOLDER else f" --dir {shlex.quote(args.dir)}")


def _all_stopped_text(args, demo) -> str:
    """What to say once every comparison has reached its decision."""
    again = f"{_demo_command(args)} --reset"
    return ("  every comparison has stopped at its decision; the feed goes on, but nothing more "
            "will be decided.\n"
            "  Press Ctrl-C to end. To watch one comparison again, archive its version from another "
            f"terminal: GAPWATCH_CONFIG={shlex.quote(path_as_typed(demo.config_path))} {program()} restart NAME "
            f"(its next look starts anew); or start the whole demo over: {again}")


def run(args) -> int:
    problem = _check(args)
    if problem:
        return problem

    # lazy: start-up time of the command line (the demo and the live stack load only here).
    from demo_db.feed import LiveFeed, SimulatedClock
    from demo_db.folder import LOG_NAME, folder_seed, prepare_folder
    from demo_db.scenario import COMPANY, DEFAULT_SEED
    from ..config import load_config
    from ..service.scheduler import run_service
    from ..store.engine import make_engine
    from ..store.readback import comparison_status, look_history

    folder_arg = Path(args.dir)
    try:
        seed = args.seed if args.seed is not None else (
            folder_seed(folder_arg) if folder_arg.exists() and not args.reset else DEFAULT_SEED)
        demo = prepare_folder(folder_arg, reset=args.reset, seed=seed)
    except (FileExistsError, NotADirectoryError, PermissionError) as exc:
        print(f"gapwatch demo: --dir {str(args.dir)!r}: {exc}", file=sys.stderr)
        return 2
    load_config(demo.config_path)  # a broken demo config fails here, with every problem listed

    handlers = _setup_logging(demo.path / LOG_NAME)
    clock = SimulatedClock(demo.start, args.speed)
    feed = LiveFeed(demo.path, clock, seed=seed)
    stop = threading.Event()
    failures = []

    def service():
        try:
            run_service(str(demo.config_path), stop_event=stop, clock=clock, holder="gapwatch-demo")
        except BaseException as exc:  # noqa: BLE001 - reported, then the demo stops
            failures.append(exc)
            logging.getLogger("gapwatch.demo").exception("service stopped")
            stop.set()

    feed_thread = threading.Thread(target=feed.run, args=(stop,), name="demo-feed", daemon=True)
    service_thread = threading.Thread(target=service, name="demo-service", daemon=True)

    what = "created" if demo.created else "resumed"
    print(f"gapwatch demo: {what} {demo.path}", flush=True)
    if demo.created:
        total = sum(demo.rows.values())
        print(f"  {total} events of history seeded in {len(demo.rows)} tables", flush=True)
    print(f"  config: {demo.config_path}", flush=True)
    print(f"  from another terminal in this folder: GAPWATCH_CONFIG={shlex.quote(path_as_typed(demo.config_path))} "
          f"{program()} status", flush=True)

    dashboard = None
    previous_term = signal.getsignal(signal.SIGTERM)
    previous_int = signal.getsignal(signal.SIGINT)
    interrupted = threading.Event()
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, lambda *_: stop.set())

        # Ctrl-C only asks the loop below to stop: a KeyboardInterrupt raised wherever the main
        # thread happens to be (inside a store read of the watcher, say) could leave that read
        # half done while the service and the final summary still need the store.
        def _interrupt(*_):
            interrupted.set()
            stop.set()

        signal.signal(signal.SIGINT, _interrupt)
    watcher = _Watcher(make_engine(demo.store_url), comparison_status, look_history, clock)
    port = args.port
    if not args.no_dashboard and not port_is_free(DASHBOARD_ADDRESS, port):
        port = free_port(DASHBOARD_ADDRESS)
        print(f"  port {args.port} is in use; the dashboard takes port {port} instead", flush=True)
    try:
        feed_thread.start()
        service_thread.start()
        if not args.no_dashboard:
            dashboard = _start_dashboard(demo.config_path, port, demo.path)
            print(f"  dashboard: http://{DASHBOARD_ADDRESS}:{port}/  (log: {demo.path / 'dashboard.log'})", flush=True)
        print("", flush=True)
        print(EXPLANATION.format(company=COMPANY, speed=args.speed,
                                 start=demo.start.strftime("%A %d %B %Y %H:%M UTC")), flush=True)
        print("", flush=True)
        print("Press Ctrl-C to stop." if args.duration is None else
              f"Stopping after {args.duration:g} seconds (or Ctrl-C).", flush=True)
        deadline = None if args.duration is None else time.monotonic() + args.duration
        all_stopped_told = False
        try:
            while not stop.is_set():
                left = None if deadline is None else deadline - time.monotonic()
                if left is not None and left <= 0:
                    break
                stop.wait(2.0 if left is None else min(2.0, left))
                rows = watcher.poll()
                if rows and all(row["stopped"] for row in rows) and not all_stopped_told:
                    all_stopped_told = True
                    print(_all_stopped_text(args, demo), flush=True)
                if dashboard is not None and dashboard.poll() is not None and not stop.is_set():
                    print(f"  the dashboard exited (code {dashboard.returncode}); see dashboard.log", flush=True)
                    dashboard = None
        except KeyboardInterrupt:
            interrupted.set()
        if interrupted.is_set():
            print("\nstopping ...", flush=True)
    finally:
        stop.set()
        service_thread.join(timeout=60) if service_thread.is_alive() else None
        feed_thread.join(timeout=30) if feed_thread.is_alive() else None
        _stop_dashboard(dashboard)
        feed.close()
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGTERM, previous_term)
            signal.signal(signal.SIGINT, previous_int)

    print(f"\nwhere things stand (simulated time {_simulated(clock())}):", flush=True)
    watcher.poll(final=True)
    watcher.close()
    if feed.errors:
        print(f"  the feed retried {len(feed.errors)} time(s); last problem: {feed.errors[-1]}", flush=True)
    _teardown_logging(handlers)
    if service_thread.is_alive():
        print("gapwatch demo: the service did not stop within 60 s", file=sys.stderr)
        return 1
    if failures:
        print(f"gapwatch demo: the monitoring service stopped: {failures[0]}", file=sys.stderr)
        return 1
    print(f"Run `{_demo_command(args)}` again to continue where it stopped, or add --reset to start over. "
          f"Files: {demo.path}", flush=True)
    return 0
