"""`gapwatch status`, `gapwatch history` and `gapwatch dashboard` through the CLI entry point."""

from __future__ import annotations

import csv
import io
import json
import os
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path

import pytest
import sqlalchemy as sa

from monitor.store import readback
from monitor.vocabulary import estimate_words

from monitor.cli import main
from monitor.commands import dashboard as dashboard_command
from monitor.store.models import Comparison, Look

import store_seed

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def config(tmp_path):
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    store_seed.seed_store(url, now=datetime.now(timezone.utc))
    path = tmp_path / "gapwatch.toml"
    path.write_text('[store]\nurl = "sqlite:///store.sqlite"\n\n[sources.ops]\nurl = "sqlite:///ops.sqlite"\n')
    return path, url


def _last_looks(url):
    engine = sa.create_engine(url)
    with engine.connect() as conn:
        last = (sa.select(Look.comparison_id, sa.func.max(Look.look_number).label("k"))
                .group_by(Look.comparison_id).subquery())
        rows = conn.execute(
            sa.select(Comparison.name, Comparison.version, Comparison.archived, Look.n1, Look.n2,
                      Look.estimate, Look.fraction)
            .join(Look, Look.comparison_id == Comparison.id)
            .join(last, (last.c.comparison_id == Look.comparison_id) & (last.c.k == Look.look_number))
        ).mappings().all()
    engine.dispose()
    return {(r["name"], r["version"]): r for r in rows}


def test_status_json_matches_the_store(config, capsys):
    path, url = config
    assert main(["status", "--format", "json", "--config", str(path)]) == 0
    rows = json.loads(capsys.readouterr().out)
    truth = _last_looks(url)
    assert len(rows) == sum(1 for r in truth.values() if not r["archived"])
    for row in rows:
        for key in ("name", "state", "looks", "n1", "n2", "estimate", "fraction"):
            assert key in row
        t = truth[(row["name"], row["version"])]
        assert (row["n1"], row["n2"]) == (t["n1"], t["n2"])
        assert row["fraction"] == pytest.approx(t["fraction"])
        if t["estimate"] is not None:
            assert row["estimate"] == pytest.approx(t["estimate"])


def test_status_all_adds_archived_versions(config, capsys):
    path, _ = config
    main(["status", "--format", "json", "--config", str(path), "--all"])
    rows = json.loads(capsys.readouterr().out)
    assert [(r["version"], r["archived"]) for r in rows if r["name"] == "line-output-shift"] == [
        (1, True), (2, False)]


def test_status_table_shows_states_numbers_and_the_design_effect_warning(config, capsys):
    path, url = config
    assert main(["status", "--config", str(path)]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    assert lines[0].split()[:3] == ["comparison", "state", "looks"]
    pick = next(line for line in lines if line.startswith("pick-seconds"))
    t = _last_looks(url)[("pick-seconds", 1)]
    assert "◷ collecting" in pick and f"{t['n1']} / {t['n2']}" in pick
    assert f"{100 * t['fraction']:.0f}%" in pick and "deff" in pick
    # the groups by their display names and the design in words, then the warning with its remedy
    assert lines[lines.index(pick) + 1].strip() == ("East depot minus West depot: Welch t, two-sided, alpha 0.05, "
                                                    "O'Brien–Fleming-type spending")
    row = next(r for r in readback.comparison_status(sa.create_engine(url)) if r["name"] == "pick-seconds")
    assert estimate_words(row["estimate"], row["ci_low"], row["ci_high"], unit="s") in pick  # in seconds
    warning = lines[lines.index(pick) + 2]
    assert warning.strip().startswith("warning:") and "design effect" in warning

    assert "◆ difference found" in out and "stopped" in out
    assert "line-output-shift v2" in out and "archived" not in out


def test_history_json_has_every_look(config, capsys):
    path, _ = config
    assert main(["history", "pick-seconds", "--format", "json", "--config", str(path)]) == 0
    looks = json.loads(capsys.readouterr().out)
    assert [h["look"] for h in looks] == list(range(1, 10))
    for key in ("look", "as_of", "n1", "n2", "estimate", "statistic", "p_value", "fraction",
                "boundary_z", "cumulative_alpha", "decision", "excluded", "clusters", "design_effect",
                "effective_n"):
        assert key in looks[0]
    assert looks[0]["excluded"] == {"null_value": 2, "out_of_range": 1}


def test_history_csv_and_table(config, capsys):
    path, _ = config
    assert main(["history", "repair-visit-minutes", "--format", "csv", "--config", str(path)]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert [r["look"] for r in rows] == ["1", "2", "3"]
    assert rows[0]["excluded_unknown_group"] == "14" and rows[0]["excluded_null_time"] == "3"
    assert rows[1]["excluded_unknown_group"] == "28"  # running totals, as recorded
    assert rows[0]["n1"] == "0" and rows[0]["decision"] == "data_problem"
    assert main(["history", "pick-seconds", "--config", str(path)]) == 0
    table = capsys.readouterr().out.splitlines()
    assert table[0].split()[:2] == ["look", "as"] and len(table) >= 10
    assert any("design effect" in line for line in table)


def test_history_of_an_older_version(config, capsys):
    path, _ = config
    main(["history", "line-output-shift", "--version", "1", "--format", "json", "--config", str(path)])
    looks = json.loads(capsys.readouterr().out)
    assert len(looks) == 6 and looks[-1]["decision"] == "plan_complete"


def test_errors_are_one_line_and_exit_2(config, tmp_path, capsys):
    path, _ = config
    assert main(["history", "pick-second", "--config", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "'pick-second'" in err and "pick-seconds" in err
    assert main(["status", "--config", str(tmp_path / "missing.toml")]) == 2
    assert "missing.toml" in capsys.readouterr().err
    with pytest.raises(SystemExit) as stop:
        main(["history", "pick-seconds", "--version", "zero", "--config", str(path)])
    assert stop.value.code == 2
    assert "--version" in capsys.readouterr().err


def test_empty_store_says_so(tmp_path, capsys):
    store_seed.migrate(f"sqlite:///{tmp_path / 'store.sqlite'}")
    path = tmp_path / "gapwatch.toml"
    path.write_text('[store]\nurl = "sqlite:///store.sqlite"\n')
    assert main(["status", "--config", str(path)]) == 0
    assert "no comparisons" in capsys.readouterr().out
    assert main(["status", "--config", str(path), "--format", "json"]) == 0
    assert json.loads(capsys.readouterr().out) == []


def test_status_in_a_real_process(config):
    path, url = config
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    done = subprocess.run(
        [sys.executable, "-m", "monitor", "status", "--format", "json", "--config", str(path)],
        capture_output=True, text=True, env=env, cwd=path.parent, timeout=120,
    )
    assert done.returncode == 0, done.stderr
    rows = json.loads(done.stdout)
    assert {r["name"] for r in rows} == {n for (n, v), r in _last_looks(url).items() if not r["archived"]}


def test_dashboard_command_line(tmp_path):
    command = dashboard_command.streamlit_command(port=8765, address="127.0.0.1")
    # Streamlit's `run`, through the dashboard's server entry (which checks the store beside it).
    assert command[1:4] == ["-m", "dashboard", "run"]
    assert Path(command[4]) == ROOT / "dashboard" / "app.py" and Path(command[4]).is_file()
    pairs = dict(zip(command[5::2], command[6::2]))
    assert pairs["--server.address"] == "127.0.0.1" and pairs["--server.port"] == "8765"
    assert pairs["--browser.gatherUsageStats"] == "false" and pairs["--server.headless"] == "true"
    assert pairs["--server.fileWatcherType"] == "none"
    env = dashboard_command.dashboard_environment(tmp_path / "x.toml", environ={})
    assert env["GAPWATCH_CONFIG"] == str((tmp_path / "x.toml").resolve())
    assert str(ROOT) in env["PYTHONPATH"].split(os.pathsep)
    assert env["GAPWATCH_PROGRAM"]  # how the server quotes a gapwatch command in a store problem


def test_dashboard_parser_defaults_and_bad_port(capsys):
    from monitor.cli import build_parser

    args = build_parser().parse_args(["dashboard"])
    assert args.address == "127.0.0.1" and args.port == 8501
    with pytest.raises(SystemExit) as stop:
        build_parser().parse_args(["dashboard", "--port", "99999"])
    assert stop.value.code == 2 and "--port" in capsys.readouterr().err


def test_status_reads_times_against_a_clock_running_ahead(tmp_path, capsys):
    from datetime import timedelta

    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    store_seed.seed_store(url, now=datetime.now(timezone.utc) + timedelta(days=2))
    engine = sa.create_engine(url)
    with engine.begin() as conn:  # a one-sided ("less") design records no lower end
        cid = conn.execute(sa.select(Comparison.id).where(Comparison.name == "pick-seconds")).scalar_one()
        conn.execute(sa.update(Look).where(Look.comparison_id == cid).values(ci_low=None))
    engine.dispose()
    path = tmp_path / "gapwatch.toml"
    path.write_text('[store]\nurl = "sqlite:///store.sqlite"\n')
    assert main(["status", "--config", str(path)]) == 0
    out = capsys.readouterr().out
    pick = next(line for line in out.splitlines() if line.startswith("pick-seconds"))
    assert "[open, " in pick and "inf" not in pick
    assert pick.rstrip().endswith("in 10 min")  # every 10m after the newest look, not "in 2 days"
    assert out.splitlines()[-1].startswith("note: The newest look in the store")


def test_a_look_without_an_interval_says_so(config, capsys):
    path, url = config
    engine = sa.create_engine(url)
    with engine.begin() as conn:  # a look that tested nothing records no interval
        cid = conn.execute(sa.select(Comparison.id).where(Comparison.name == "pick-seconds")).scalar_one()
        conn.execute(sa.update(Look).where(Look.comparison_id == cid).values(ci_low=None, ci_high=None))
    engine.dispose()
    main(["status", "--config", str(path)])
    pick = next(line for line in capsys.readouterr().out.splitlines() if line.startswith("pick-seconds"))
    assert "(no interval)" in pick and "inf" not in pick
