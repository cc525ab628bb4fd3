"""The README's set-up, tried as a new user would try it (standard library only).

A fresh clone of this repository; the set-up line of the README's "Set-up" section run exactly
as printed (it makes the virtual environment, installs gapwatch and starts the demo); Ctrl-C
once the demo shows its first looks; then, in the same clone, the README's commands for
"another terminal" and the hint the demo printed. Any command that fails ends the run with
status 1 and its output.

    python3 .ci/readme_setup.py            # from the top of the repository
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
# Installing from a cold cache can take minutes; the demo then needs seconds.
DEMO_DEADLINE_SECONDS = 1500


def setup_line(readme: str) -> str:
    section = readme.split("## Set-up", 1)[1]
    return re.search(r"```\n(.+?)\n```", section, re.S).group(1).strip()


def another_terminal_lines(readme: str) -> list[str]:
    return [line.strip() for line in readme.splitlines() if line.startswith("GAPWATCH_CONFIG=demo_db/")]


def user_environment() -> dict:
    """A shell in which nothing was activated."""
    env = {k: v for k, v in os.environ.items() if k not in ("VIRTUAL_ENV", "GAPWATCH_CONFIG", "PYTHONPATH")}
    env["PATH"] = os.pathsep.join(p for p in env.get("PATH", "").split(os.pathsep)
                                  if p and not p.rstrip("/").endswith(("/.venv/bin",)))
    return env


def fail(what: str, output: str) -> int:
    print(f"README set-up: {what}\n{output[-4000:]}", file=sys.stderr)
    return 1


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="gapwatch-readme-") as work:
        clone = Path(work) / "gapwatch"
        subprocess.run(["git", "clone", "--quiet", str(ROOT), str(clone)], check=True)
        readme = (clone / "README.md").read_text(encoding="utf-8")
        line = setup_line(readme)
        print(f"README set-up: {line}", flush=True)
        lines: list[str] = []
        demo = subprocess.Popen(["bash", "-c", line], cwd=clone, env=user_environment(), text=True,
                                stdout=subprocess.PIPE, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                start_new_session=True)
        reader = threading.Thread(target=lambda: lines.extend(l.rstrip("\n") for l in demo.stdout), daemon=True)
        reader.start()
        deadline = time.monotonic() + DEMO_DEADLINE_SECONDS
        while not any("simulated]" in l for l in lines):
            if demo.poll() is not None or time.monotonic() > deadline:
                if demo.poll() is None:
                    os.killpg(demo.pid, signal.SIGKILL)
                reader.join(timeout=10)
                return fail("the demo never showed a look", "\n".join(lines))
            time.sleep(1)
        os.killpg(demo.pid, signal.SIGINT)  # Ctrl-C, as in a terminal: the whole foreground group
        try:
            code = demo.wait(timeout=180)
        except subprocess.TimeoutExpired:
            os.killpg(demo.pid, signal.SIGKILL)
            return fail("the demo did not stop on Ctrl-C", "\n".join(lines))
        reader.join(timeout=10)
        if code != 0:
            return fail(f"the set-up line exited {code}", "\n".join(lines))
        hints = [m.group(1) for l in lines if (m := re.search(r"from another terminal in this folder: (.+)$", l))]
        for command in another_terminal_lines(readme) + hints:
            done = subprocess.run(["bash", "-c", command], cwd=clone, env=user_environment(),
                                  capture_output=True, text=True, timeout=300)
            print(f"README set-up: {command} -> exit {done.returncode}", flush=True)
            if done.returncode != 0:
                return fail(f"`{command}` exited {done.returncode}", done.stdout + done.stderr)
    print("README set-up: every command worked as printed", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
