"""Every command the README prints works as printed after the set-up, and so does every hint.

A new user runs the README's commands from the top of the checkout after its two set-up
commands: nothing on the PATH, the project's ``.venv`` beside them. These tests build that
situation in a temporary folder — the project's virtual environment linked as ``.venv``, the
scenario's source copied as ``demo_db/`` as in a checkout — and run each command line with
bash, exactly as the README prints it; the commands the tool prints on the way (the demo's
"from another terminal" and "run again" hints) are run the same way.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import threading
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")

# Blocks whose commands need what a test cannot give; each with the reason.
SKIPPED = {
    "python3 -m venv .venv": "the set-up itself: it makes the environment the other commands use "
                             "(tests/run.sh makes it the same way)",
    "bash tests/run.sh": "the test suite itself",
    "/opt/gapwatch/venv/bin/gapwatch": "a deployed server (gapwatch in /opt/gapwatch/venv, its "
                                       "configuration in /etc/gapwatch)",
    "sudo systemctl": "systemd on a server",
    "for s in obrien-fleming pocock": "a benchmark of several CPU-minutes",
    ".venv/bin/python tests/benchmarks/before_after.py": "a benchmark of several CPU-minutes (the rate run "
                                                          "over half an hour)",
    ".venv/bin/python tests/benchmarks/small_sample_false_alarm.py": "a benchmark of several CPU-minutes "
                                                                      "(the suite runs its rows smaller)",
}
DEMO = ".venv/bin/gapwatch demo"
DURING_DEMO = "GAPWATCH_CONFIG=demo_db/"


def shell_blocks(text):
    """The README's shell code blocks (no language given, or sh/bash/console), as lists of lines."""
    blocks = []
    for match in re.finditer(r"^( *)```(\w*)\n(.*?)^\1```", text, re.S | re.M):
        if match.group(2) in ("", "sh", "bash", "console", "shell"):
            lines = [line.strip() for line in match.group(3).splitlines() if line.strip()]
            blocks.append(lines)
    return blocks


def readme_commands():
    """(command, reason-to-skip or None) for every command line of every shell block."""
    out = []
    for lines in shell_blocks(README):
        reason = next((why for prefix, why in SKIPPED.items() if lines[0].startswith(prefix)), None)
        out.extend((line, reason) for line in lines)
    return out


def standalone_commands():
    return [c for c, reason in readme_commands()
            if reason is None and c != DEMO and not c.startswith(DURING_DEMO)]


def test_every_readme_command_is_run_here_or_skipped_for_a_stated_reason():
    commands = readme_commands()
    assert DEMO in [c for c, _ in commands]
    assert any(c.startswith(DURING_DEMO) for c, _ in commands)
    for command, reason in commands:
        if reason is None:
            # Runnable after the set-up means: the program as the set-up leaves it.
            program = command.split("=", 1)[1].split(" ", 1)[1] if command.startswith("GAPWATCH_CONFIG=") else command
            assert program.startswith((".venv/bin/gapwatch ", ".venv/bin/python ")), command


@pytest.fixture
def checkout(tmp_path):
    """The top of a checkout after the set-up: ``.venv`` and the scenario's source folder."""
    top = tmp_path / "checkout"
    top.mkdir()
    venv = ROOT / ".venv"
    if not (venv / "bin" / "gapwatch").exists():
        pytest.fail("the project's .venv with gapwatch installed is missing (tests/run.sh makes it)")
    (top / ".venv").symlink_to(venv)
    (top / "demo_db").mkdir()
    for source in (ROOT / "demo_db").glob("*.py"):
        shutil.copy2(source, top / "demo_db" / source.name)
    return top


def user_environment():
    """The environment of a new user's shell: the set-up activated nothing."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("GAPWATCH_CONFIG", "VIRTUAL_ENV", "PYTHONPATH", "PYTHONHOME")}
    venv_bin = str(ROOT / ".venv" / "bin")
    env["PATH"] = os.pathsep.join(p for p in env.get("PATH", "").split(os.pathsep)
                                  if p and os.path.realpath(p) != os.path.realpath(venv_bin))
    return env


def run_as_printed(command, cwd, timeout=300):
    proc = subprocess.run(["bash", "-c", command], cwd=cwd, env=user_environment(), capture_output=True,
                          text=True, timeout=timeout)
    assert proc.returncode == 0, f"`{command}` exited {proc.returncode}:\n{proc.stdout[-2000:]}{proc.stderr[-2000:]}"
    return proc.stdout


@pytest.mark.parametrize("command", [
    pytest.param(c, marks=[pytest.mark.slow] if "rehearsal" in c else [], id=c.split(" --")[0])
    for c in standalone_commands()
])
def test_readme_command_works_as_printed(command, checkout):
    out = run_as_printed(command, checkout)
    assert out.strip()
    if " --json" in command:
        json.loads(out)
    if "demo_db.rehearsal" in command:
        seeds = re.search(r"--seeds ((?:\d+ ?)+)", command).group(1).split()
        assert [line.split(":")[0] for line in out.splitlines()] == [f"seed {s}" for s in seeds]
        # What the README says the rehearsal shows, seed by seed.
        for line in out.splitlines():
            assert "pick-seconds: difference_found" in line, line
            assert "fill-giveaway: plan_complete" in line, line
            assert "line-daily-output: difference_found" in line, line


class _Demo:
    """``gapwatch demo`` started exactly as printed, read line by line, stopped with Ctrl-C."""

    def __init__(self, command, cwd):
        # Its own process group: Ctrl-C in a terminal reaches the whole foreground group.
        self.process = subprocess.Popen(["bash", "-c", command], cwd=cwd, env=user_environment(),
                                        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                                        start_new_session=True)
        self.lines = []
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self):
        for line in self.process.stdout:
            self.lines.append(line.rstrip("\n"))

    def wait_for(self, pattern, timeout=180):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            for line in list(self.lines):
                match = re.search(pattern, line)
                if match:
                    return match
            if self.process.poll() is not None and not self._reader.is_alive():
                break
            time.sleep(0.2)
        raise AssertionError(f"no line matching {pattern!r}; output:\n" + "\n".join(self.lines[-60:]))

    def ctrl_c(self, timeout=120):
        os.killpg(self.process.pid, signal.SIGINT)
        try:
            code = self.process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            os.killpg(self.process.pid, signal.SIGKILL)
            raise
        self._reader.join(timeout=10)
        return code


@pytest.mark.slow
def test_the_demo_and_every_command_and_hint_around_it_work_as_printed(checkout):
    during = [c for c, reason in readme_commands() if reason is None and c.startswith(DURING_DEMO)]
    demo = _Demo(DEMO, checkout)
    try:
        hint = demo.wait_for(r"from another terminal in this folder: (.+)$").group(1)
        assert hint == "GAPWATCH_CONFIG=demo_db/gapwatch.toml .venv/bin/gapwatch status"
        demo.wait_for(r"\[.* UTC, simulated\] pick-seconds: ")
        for command in [hint, *during]:
            out = run_as_printed(command, checkout, timeout=120)
            assert ("pick-seconds" in out) if command.endswith(" status") else out.startswith("look ")
    finally:
        code = demo.ctrl_c()
    assert code == 0, "\n".join(demo.lines[-40:])
    again = demo.wait_for(r"Run `(.+)` again to continue where it stopped").group(1)
    assert again == DEMO

    resumed = _Demo(again, checkout)
    try:
        resumed.wait_for(r"^gapwatch demo: resumed ")
        resumed.wait_for(r"\[.* UTC, simulated\] ")
    finally:
        code = resumed.ctrl_c()
    assert code == 0, "\n".join(resumed.lines[-40:])
