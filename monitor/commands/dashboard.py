"""``gapwatch dashboard``: the Streamlit dashboard on the history store (read-mostly)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

from ._common import add_config_option, open_store, whole_number_type

__all__ = ["register", "run", "app_path", "streamlit_command"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "dashboard",
        help="open the dashboard on the history store",
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
    """The dashboard entry script, found from the installed package."""
    import dashboard

    return Path(dashboard.__file__).resolve().parent / "app.py"


def streamlit_command(*, port, address, app=None):
    """The ``streamlit run`` argument list (no usage statistics, headless, no browser)."""
    app = app or app_path()
    return [
        sys.executable, "-m", "streamlit", "run", str(app),
        "--server.address", address,
        "--server.port", str(port),
        "--server.headless", "true",
        "--browser.serverAddress", address,
        "--browser.gatherUsageStats", "false",
        "--global.developmentMode", "false",
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
    return env


def run(args) -> int:
    # Fail here, with the CLI's one-line message, rather than inside the browser.
    open_store(args.config).dispose()
    command = streamlit_command(port=args.port, address=args.address)
    env = dashboard_environment(args.config)
    print(f"gapwatch dashboard on http://{args.address}:{args.port} (Ctrl+C stops it)", file=sys.stderr)
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
