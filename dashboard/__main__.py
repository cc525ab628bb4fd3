"""The dashboard's server process: ``python -m dashboard run APP [Streamlit options]``.

``gapwatch dashboard`` hands over to this module as soon as its port is known to be free. It
starts Streamlit exactly as ``python -m streamlit run`` would and, in a background thread,
checks the history store once the server listens. The check loads what the board's first
run needs anyway (SQLAlchemy, the store's schema and read side, the configuration's URL
rule), then the board's own modules: the work is done while the browser fetches the page,
and a page script's imports share this process's modules. Waiting for the server to listen
keeps the thread from slowing the server's own start. The chart stack (pandas, Altair,
scipy) is not loaded here: it would compete with the first page, and is loaded after it
(``app.py``).

A store that cannot be read ends the process with one line and exit status 2, as every
command does; the address is announced only once the store is known good.
"""

from __future__ import annotations

import importlib
import os
import socket
import sys
import threading
import time

# The store's problem is printed as the command line prints it (``gapwatch dashboard: …``),
# with quoted commands written as the user ran gapwatch (passed in by the command).
_PROGRAM_VARIABLE = "GAPWATCH_PROGRAM"
# The modules of the board's first run, beyond what the store check itself loads.
_BOARD_MODULES = ("dashboard.data", "dashboard.style", "dashboard.tables", "dashboard.formats")
# What Streamlit itself loads on a session's first run, for the page and navigation icons: its
# emoji and icon name lists. Its own modules, free to move in a later Streamlit: a missing one
# is skipped.
_STREAMLIT_FIRST_RUN = ("streamlit.emojis", "streamlit.material_icon_names")
# Seconds between hand-overs of the interpreter lock while the thread loads (Python's usual: 0.005).
_SWITCH_WHILE_LOADING = 0.001


def _option(arguments, name, default):
    """The value of ``--name VALUE`` in Streamlit's argument list (``default`` when absent)."""
    for i, word in enumerate(arguments[:-1]):
        if word == name:
            return arguments[i + 1]
    return default


def _refuse(message) -> None:
    program = os.environ.get(_PROGRAM_VARIABLE) or "gapwatch"
    text = str(message).replace("`gapwatch ", f"`{program} ")
    print(f"gapwatch dashboard: {text}", file=sys.stderr, flush=True)
    # From a thread, while the server starts: end the whole process at once, with the
    # command line's status for bad input, before any page is served from a store in doubt.
    os._exit(2)


def _wait_listening(address, port, seconds=30.0) -> None:
    """Until the server accepts connections on its port (at most ``seconds``)."""
    host = "127.0.0.1" if address in ("", "0.0.0.0") else ("::1" if address == "::" else address)
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        try:
            socket.create_connection((host, int(port)), timeout=1).close()
            return
        except OSError:
            time.sleep(0.02)


def check_store_and_warm(config_path, announce, listening=None) -> None:
    """Check the store the configuration names, then load the board's modules.

    Waits for ``listening()`` first, when given: the server's own start is not slowed, and
    the work is done while the browser fetches the page. Calls ``announce()`` once the store
    is known good; ends the process (status 2) otherwise.
    """
    if listening is not None:
        listening()
    # While this thread loads modules, the server answers the browser's many requests for the
    # page's code: hand the interpreter lock over more often, so none waits long behind an import.
    usual = sys.getswitchinterval()
    sys.setswitchinterval(_SWITCH_WHILE_LOADING)
    try:
        _check_and_load(config_path, announce)
    finally:
        sys.setswitchinterval(usual)


def _check_and_load(config_path, announce) -> None:
    # lazy: loaded in the background thread, beside the server's start (this module's purpose).
    from monitor.config import store_url_from_config
    from monitor.errors import GapwatchError
    from monitor.store.readback import open_store

    try:
        open_store(store_url_from_config(config_path, store_only=True)).dispose()
    except GapwatchError as problem:
        _refuse(problem)
    announce()
    for module in _BOARD_MODULES:
        importlib.import_module(module)
    for module in _STREAMLIT_FIRST_RUN:
        try:
            importlib.import_module(module)
        except ImportError:
            pass


def main(argv=None) -> int:
    arguments = sys.argv[1:] if argv is None else list(argv)
    address = _option(arguments, "--server.address", "127.0.0.1")
    port = _option(arguments, "--server.port", "8501")

    def announce():
        print(f"gapwatch dashboard on http://{address}:{port} (Ctrl+C stops it)", file=sys.stderr, flush=True)

    config_path = os.environ.get("GAPWATCH_CONFIG") or "gapwatch.toml"
    threading.Thread(target=check_store_and_warm,
                     args=(config_path, announce, lambda: _wait_listening(address, port)),
                     name="gapwatch-store-check", daemon=True).start()
    # lazy: Streamlit's command line is the server itself; imported after the thread has started.
    from streamlit.web import cli

    # As ``python -m streamlit`` does: the server sees the same command line either way.
    sys.argv = ["streamlit", *arguments]
    return cli.main(prog_name="streamlit")


if __name__ == "__main__":
    sys.exit(main())
