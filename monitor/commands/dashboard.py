"""``gapwatch dashboard``: the Streamlit dashboard on the history store (read-mostly)."""

from __future__ import annotations

import importlib.util
import os
import socket
import subprocess
import sys
from pathlib import Path

from . import SUMMARIES
from ._common import add_config_option, program, whole_number_type

__all__ = ["register", "run", "app_path", "streamlit_command", "port_is_free", "free_port"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "dashboard",
        help=SUMMARIES["dashboard"],
        description="Start the Streamlit dashboard on the history store. It binds to 127.0.0.1 "
                    "unless told otherwise, sends no usage statistics and opens no browser. "
                    "Acknowledging alerts needs the password in $GAPWATCH_DASHBOARD_PASSWORD; "
                    "without it the dashboard is read-only.",
    )
    add_config_option(p)
    p.add_argument("--port", type=whole_number_type(1, 65535), default=8501, metavar="P", help="port (default 8501)")
    p.add_argument("--address", default="127.0.0.1", metavar="A",
                   help="address to bind (default 127.0.0.1; other addresses expose the dashboard)")
    p.set_defaults(func=run)


def app_path() -> Path:
    """The dashboard entry script, found from the installed package.

    Found, not imported: the dashboard runs in its own Streamlit process, and the
    command line never imports the layer above it.
    """
    spec = importlib.util.find_spec("dashboard")
    return Path(spec.origin).resolve().parent / "app.py"


def port_is_free(address: str, port: int) -> bool:
    """Whether a server could listen on ``address:port`` now (nothing else holds it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        # As the server will: a port left in TIME_WAIT by a server that just stopped is free.
        probe.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            probe.bind((address, port))
        except OSError:
            return False
    return True


def free_port(address: str) -> int:
    """A port nothing listens on at ``address``, chosen by the system."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind((address, 0))
        return probe.getsockname()[1]


def streamlit_command(*, port, address, app=None):
    """The server's argument list: ``streamlit run`` through the dashboard's own entry (no usage
    statistics, headless, no browser, no file watcher).

    ``python -m dashboard`` is Streamlit's ``run`` plus the store check, done in the server
    process once it listens (see ``dashboard/__main__.py``): this command then loads nothing
    of the store before it hands over.
    """
    app = app or app_path()
    return [
        sys.executable, "-m", "dashboard", "run", str(app),
        "--server.address", address,
        "--server.port", str(port),
        "--server.headless", "true",
        "--browser.serverAddress", address,
        "--browser.gatherUsageStats", "false",
        "--global.developmentMode", "false",
        # Nobody edits the pages of a running dashboard: no file watcher to set up per session.
        "--server.fileWatcherType", "none",
    ]


def dashboard_environment(config_path, environ=None):
    """The environment of the Streamlit process: the config path, and the package importable."""
    env = dict(os.environ if environ is None else environ)
    config_path = config_path or env.get("GAPWATCH_CONFIG") or "gapwatch.toml"
    # Absolute, because Streamlit runs from the dashboard folder (where its theme lives).
    env["GAPWATCH_CONFIG"] = str(Path(config_path).resolve())
    package_root = str(app_path().parent.parent)
    # Streamlit puts only the script's folder on sys.path; the pages import monitor and dashboard.
    env["PYTHONPATH"] = os.pathsep.join(p for p in (package_root, env.get("PYTHONPATH")) if p)
    # The server words a store problem as this command would, quoting gapwatch as run here.
    env["GAPWATCH_PROGRAM"] = program()
    return env


def run(args) -> int:
    # The server process checks the store (one line and status 2 when it cannot be read, before
    # the address is announced): checking it here first cost half a second of imports that the
    # server then loaded again for the first page.
    if not port_is_free(args.address, args.port):
        print(f"gapwatch dashboard: --port {args.port}: {args.address}:{args.port} is already in use; "
              f"choose another with --port P", file=sys.stderr)
        return 2
    command = streamlit_command(port=args.port, address=args.address)
    env = dashboard_environment(args.config)
    sys.stdout.flush()
    sys.stderr.flush()
    if os.name == "posix":
        # Become the server: a signal from a supervisor (or Ctrl+C) then reaches Streamlit
        # itself, and no server can outlive this command as an orphan.
        os.chdir(app_path().parent)
        os.execve(sys.executable, command, env)
    try:
        return subprocess.call(command, env=env, cwd=app_path().parent)
    except KeyboardInterrupt:
        return 130
