"""The README is the reference: every command, option and configuration key appears in it."""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import pytest

from monitor import cli, config

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")


def _subcommands():
    parser = cli.build_parser()
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return action.choices


def test_every_command_module_is_registered():
    assert set(_subcommands()) == set(cli.COMMAND_MODULES)


@pytest.mark.parametrize("name", cli.COMMAND_MODULES)
def test_command_and_its_options_are_documented(name):
    assert f"gapwatch {name}" in README, f"`gapwatch {name}` is not in the README"
    sub = _subcommands()[name]
    options = {s for a in sub._actions for s in a.option_strings if s.startswith("--") and s != "--help"}
    missing = sorted(o for o in options if not re.search(re.escape(o) + r"\b", README))
    assert not missing, f"gapwatch {name}: options missing from the README: {missing}"


CONFIG_KEYS = sorted(config.config_keys())


@pytest.mark.parametrize("key", CONFIG_KEYS)
def test_config_key_is_documented(key):
    assert re.search(rf"`{re.escape(key)}`|\b{re.escape(key)} =", README), f"config key {key!r} is not in the README"


def test_readme_opens_with_the_job_and_carries_the_caution():
    first = README.split("\n\n")[1]
    assert "operations" in first.lower()
    assert "never replaces" in README
