"""Real alert receivers on 127.0.0.1 for the tests: a webhook server and an SMTP server.

``WebhookReceiver`` is ``http.server`` in a thread that records every request's
raw body and headers; it can go down (the port refuses connections) and come
back on the same port, or answer with an error status for a while.
``MailReceiver`` is an aiosmtpd server that keeps every message it receives.
"""

from __future__ import annotations

import email
import email.policy
import hashlib
import hmac
import json
import socket
import threading
import time
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

from aiosmtpd.controller import Controller

__all__ = ["free_port", "WebhookReceiver", "WebhookRequest", "MailReceiver", "verify_signature"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def verify_signature(body: bytes, header: str | None, secret: str) -> bool:
    """Recompute HMAC-SHA256 of the raw body, as a receiver would."""
    if not header or not header.startswith("sha256="):
        return False
    expected = hmac.new(secret.encode(), body, hashlib.sha256).hexdigest()
    return hmac.compare_digest(expected, header[len("sha256="):])


@dataclass(frozen=True)
class WebhookRequest:
    path: str
    headers: dict
    body: bytes
    status: int

    def json(self):
        return json.loads(self.body)


class WebhookReceiver:
    """An HTTP endpoint that records POSTs. ``status`` sets the reply code."""

    def __init__(self, port: int | None = None):
        self.port = port or free_port()
        self.requests: list[WebhookRequest] = []
        self.status = 200
        self._lock = threading.Lock()
        self._server = None
        self._thread = None

    @property
    def url(self):
        return f"http://127.0.0.1:{self.port}/hook"

    def _handler(self):
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self):
                length = int(self.headers.get("Content-Length") or 0)
                body = self.rfile.read(length)
                status = receiver.status
                with receiver._lock:
                    receiver.requests.append(WebhookRequest(self.path, dict(self.headers.items()), body, status))
                self.send_response(status)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args):
                pass

        return Handler

    def up(self):
        if self._server is not None:
            return self
        deadline = time.monotonic() + 10
        while True:
            try:
                ThreadingHTTPServer.allow_reuse_address = True
                self._server = ThreadingHTTPServer(("127.0.0.1", self.port), self._handler())
                break
            except OSError:
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.1)
        self._thread = threading.Thread(target=self._server.serve_forever, kwargs={"poll_interval": 0.05},
                                        daemon=True)
        self._thread.start()
        return self

    def down(self):
        """Stop listening: connections to the port are refused until ``up``."""
        if self._server is None:
            return
        self._server.shutdown()
        self._server.server_close()
        self._thread.join(timeout=5)
        self._server = None

    def accepted(self) -> list[WebhookRequest]:
        with self._lock:
            return [r for r in self.requests if 200 <= r.status < 300]

    def __enter__(self):
        return self.up()

    def __exit__(self, *exc):
        self.down()


class _Keeper:
    def __init__(self):
        self.messages = []
        self.envelopes = []
        self.lock = threading.Lock()

    async def handle_DATA(self, server, session, envelope):
        message = email.message_from_bytes(envelope.content, policy=email.policy.default)
        with self.lock:
            self.messages.append(message)
            self.envelopes.append((envelope.mail_from, list(envelope.rcpt_tos)))
        return "250 Message accepted for delivery"


class MailReceiver:
    """An SMTP server on 127.0.0.1 (aiosmtpd) keeping what it receives.

    With ``user``/``password`` it requires AUTH LOGIN/PLAIN over the plain connection
    (allowed here only because it is a local test server).
    """

    def __init__(self, port: int | None = None, *, user=None, password=None):
        self.port = port or free_port()
        self.keeper = _Keeper()
        self.user, self.password = user, password
        self.logins = []
        kwargs = {}
        if user is not None:
            kwargs = dict(auth_required=True, auth_require_tls=False, authenticator=self._authenticate)
        self.controller = Controller(self.keeper, hostname="127.0.0.1", port=self.port, **kwargs)

    def _authenticate(self, server, session, envelope, mechanism, auth_data):
        from aiosmtpd.smtp import AuthResult

        login = auth_data.login.decode() if isinstance(auth_data.login, bytes) else auth_data.login
        secret = auth_data.password.decode() if isinstance(auth_data.password, bytes) else auth_data.password
        ok = login == self.user and secret == self.password
        self.logins.append((login, ok))
        return AuthResult(success=ok, handled=False)

    @property
    def messages(self):
        with self.keeper.lock:
            return list(self.keeper.messages)

    def __enter__(self):
        self.controller.start()
        return self

    def __exit__(self, *exc):
        self.controller.stop()


class ServiceProcess:
    """``python -m monitor run --config FILE`` as a real child process, its log in a file."""

    def __init__(self, config_path, log_path, *, env=None, args=(), cwd=None):
        import os
        import sys
        from pathlib import Path

        self.config_path = Path(config_path)
        self.log_path = Path(log_path)
        self.argv = [sys.executable, "-m", "monitor", "run", "--config", str(self.config_path), *args]
        root = Path(__file__).resolve().parent.parent
        self.env = {**os.environ, **(env or {})}
        self.env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(root), self.env.get("PYTHONPATH")]))
        self.cwd = str(cwd or self.config_path.parent)
        self.process = None

    def start(self):
        import subprocess

        self._log = open(self.log_path, "ab")
        self.process = subprocess.Popen(self.argv, stdout=self._log, stderr=subprocess.STDOUT,
                                        env=self.env, cwd=self.cwd)
        return self

    def run(self, timeout=60):
        """Run to completion (for ``--once``); returns the exit status."""
        self.start()
        try:
            return self.process.wait(timeout=timeout)
        finally:
            self._log.close()

    @property
    def pid(self):
        return self.process.pid

    def alive(self):
        return self.process is not None and self.process.poll() is None

    def log(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")
        except FileNotFoundError:
            return ""

    def signal(self, signum):
        self.process.send_signal(signum)

    def stop(self, timeout=30) -> int:
        """SIGTERM and wait; returns the exit status."""
        import signal as _signal

        if self.alive():
            self.process.send_signal(_signal.SIGTERM)
        try:
            return self.process.wait(timeout=timeout)
        finally:
            self._log.close()

    def kill(self) -> int:
        """SIGKILL: no clean-up of any kind runs in the child."""
        self.process.kill()
        code = self.process.wait(timeout=30)
        self._log.close()
        return code

    def wait_for(self, predicate, timeout=30, interval=0.1, what="condition"):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            value = predicate()
            if value:
                return value
            if self.process is not None and self.process.poll() is not None:
                raise AssertionError(f"service exited ({self.process.returncode}) before {what}:\n{self.log()[-3000:]}")
            time.sleep(interval)
        raise AssertionError(f"timed out after {timeout}s waiting for {what}:\n{self.log()[-3000:]}")

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        if self.alive():
            try:
                self.stop(timeout=20)
            except Exception:  # noqa: BLE001 - last resort in a failing test
                self.kill()
