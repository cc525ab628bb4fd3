"""What a new user reads in the first hour: the demo's terminal lines say figures in words."""

from __future__ import annotations

import re

import pytest

from monitor.commands.demo import _describe


def test_a_one_sided_interval_reads_open_in_the_demo_lines_never_inf():
    row = {"name": "desk-first-contact", "state": "collecting", "looks": 1, "estimate": -0.00892,
           "ci_low": -0.2, "ci_high": None, "fraction": 0.13}
    line = _describe(row)
    assert "difference -0.00892 [-0.2, open]" in line
    assert "inf" not in line
    row.update(ci_low=None, ci_high=0.1)
    assert "[open, 0.1]" in _describe(row)


def test_a_missing_sqlite_source_file_is_named_as_missing(tmp_path):
    from monitor.source.reader import Source, SourceSpec
    from monitor.errors import SourceUnavailableError

    spec = SourceSpec(table="calls", group_column="desk", groups=("north", "south"),
                      value_column="seconds", time_column="answered_at", shift=0.0)
    missing = tmp_path / "calls.sqlite"
    with pytest.raises(SourceUnavailableError, match=f"no such file: {re.escape(str(missing))}"):
        Source(f"sqlite:///{missing}").check(spec)
    with pytest.raises(SourceUnavailableError, match="no such folder: "):
        Source(f"sqlite:///{tmp_path / 'nowhere' / 'calls.sqlite'}").check(spec)
    assert not missing.exists()
