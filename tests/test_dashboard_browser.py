"""End to end: `gapwatch dashboard` serving a seeded store, driven by headless Chromium.

Screenshots of the board and a comparison page are saved in tests/artifacts/.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from datetime import datetime, timezone
from pathlib import Path

import pytest
import sqlalchemy as sa

from monitor.store import readback
from monitor.commands.status import fmt
from monitor.store.models import Alert, Comparison, Look

import store_seed

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parent.parent
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
PASSWORD = "harbour-light-7"


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_healthy(base, proc, seconds=90):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"dashboard exited early with {proc.returncode}")
        try:
            with urllib.request.urlopen(f"{base}/_stcore/health", timeout=2) as answer:
                if answer.status == 200:
                    return
        except OSError:
            time.sleep(0.5)
    raise TimeoutError(f"dashboard at {base} did not become healthy in {seconds} s")


@pytest.fixture
def served(tmp_path):
    if not shutil.which(CHROMIUM) and not Path(CHROMIUM).exists():
        pytest.skip(f"{CHROMIUM} is not installed")
    pytest.importorskip("playwright.sync_api")
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    info = store_seed.seed_store(url, now=datetime.now(timezone.utc))
    config = tmp_path / "gapwatch.toml"
    config.write_text('[store]\nurl = "sqlite:///store.sqlite"\n')
    port = _free_port()
    env = dict(os.environ, GAPWATCH_DASHBOARD_PASSWORD=PASSWORD, PYTHONPATH=str(ROOT))
    env.pop("GAPWATCH_CONFIG", None)
    log = open(tmp_path / "dashboard.log", "wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "monitor", "dashboard", "--config", str(config), "--port", str(port)],
        cwd=tmp_path, env=env, stdout=log, stderr=subprocess.STDOUT,
    )
    base = f"http://127.0.0.1:{port}"
    engine = sa.create_engine(url)
    try:
        _wait_healthy(base, proc)
        yield base, engine, info
    finally:
        engine.dispose()
        proc.terminate()  # the command has become the Streamlit server, so this stops it
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        log.close()
    # nothing of the server is left behind
    assert proc.returncode is not None


def _record_next_look(engine, name, extra):
    """Append one look to a comparison, as the service would: ``extra`` more events per group."""
    with engine.begin() as conn:
        comp = conn.execute(sa.select(Comparison.id, Comparison.looks_taken).where(
            Comparison.name == name, Comparison.archived.is_(False))).one()
        last = conn.execute(sa.select(*Look.__table__.columns).where(
            Look.comparison_id == comp.id, Look.look_number == comp.looks_taken)).mappings().one()
        row = {k: v for k, v in last.items() if k != "id"}
        now = datetime.now(timezone.utc)
        row.update(look_number=comp.looks_taken + 1, n1=last["n1"] + extra, n2=last["n2"] + extra,
                   as_of=now, cutoff=now, recorded_at=now)
        conn.execute(sa.insert(Look).values(**row))
        conn.execute(sa.update(Comparison).where(Comparison.id == comp.id)
                     .values(looks_taken=comp.looks_taken + 1, last_look_at=now))
        return row["n1"], row["n2"]


def _settled(page, timeout=60_000):
    """Wait until Streamlit has finished running the script and drawn its placeholders."""
    page.wait_for_function(
        "() => !document.querySelector('[data-testid=stSkeleton]')"
        " && !document.querySelector('[data-testid=stStatusWidget]')",
        timeout=timeout,
    )


def test_board_comparison_and_acknowledgement_in_chromium(served):
    from playwright.sync_api import sync_playwright

    base, engine, info = served
    ARTIFACTS.mkdir(exist_ok=True)
    rows = {r["name"]: r for r in readback.comparison_status(engine)}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(base + "/")
            page.wait_for_selector("table.gw-board", timeout=60_000)
            _settled(page)
            board = page.locator("table.gw-board")
            for name, row in rows.items():
                line = board.locator("tr.gw-row", has=page.locator(f"a:text-is('{name}')"))
                text = line.inner_text()
                assert readback.STATES[row["state"]][1] in text
                assert f"{row['n1']:,} / {row['n2']:,}" in text
                if row["estimate"] is not None:
                    assert f"{fmt(row['estimate'])} [{fmt(row['ci_low'])}, {fmt(row['ci_high'])}]" in text
            assert "design effect" in board.inner_text()
            page.screenshot(path=str(ARTIFACTS / "board.png"))

            # the board refreshes itself: a new look appears without a reload, and the filter stays
            page.get_by_label("Find a comparison").fill("pick")
            page.get_by_label("Find a comparison").press("Enter")
            page.wait_for_function(
                "() => document.querySelectorAll('table.gw-board tr.gw-row').length === 1", timeout=30_000)
            n1, n2 = _record_next_look(engine, "pick-seconds", 37)
            page.wait_for_selector(f"table.gw-board >> text={n1:,} / {n2:,}", timeout=40_000)
            assert page.get_by_label("Find a comparison").input_value() == "pick"
            assert page.locator("table.gw-board tr.gw-row").count() == 1
            rows["pick-seconds"] = next(r for r in readback.comparison_status(engine) if r["name"] == "pick-seconds")

            # open a comparison from its link on the board
            page.locator("table.gw-board a:text-is('pick-seconds')").click()
            page.wait_for_url("**/comparison?name=pick-seconds**", timeout=30_000)
            page.wait_for_selector(".gw-reading", timeout=60_000)
            page.wait_for_selector("[data-testid=stVegaLiteChart] canvas, [data-testid=stVegaLiteChart] svg",
                                   timeout=60_000)
            _settled(page)
            values = page.locator("[data-testid=stMetricValue]").all_inner_texts()
            pick = rows["pick-seconds"]
            assert fmt(pick["estimate"]) in values
            assert f"{pick['n1']:,} / {pick['n2']:,}" in values
            assert f"{100 * pick['fraction']:.0f}%" in values
            assert page.locator("[data-testid=stVegaLiteChart]").count() == 4
            assert "never replaces, operational judgement" in page.locator(".gw-reading").inner_text()
            page.set_viewport_size({"width": 1400, "height": 2600})
            page.wait_for_timeout(1500)
            page.screenshot(path=str(ARTIFACTS / "comparison.png"))
            page.set_viewport_size({"width": 1400, "height": 1000})

            # acknowledge an alert: wrong password first, then the right one
            page.goto(base + "/alerts")
            page.wait_for_selector("text=Acknowledge alert", timeout=60_000)
            _settled(page)
            page.get_by_label("Your name").fill("yard supervisor")
            page.get_by_label("Dashboard password").fill("harbour-light-8")
            page.get_by_role("button", name="Acknowledge alert").click()
            page.wait_for_selector("text=Wrong password", timeout=30_000)
            assert page.get_by_label("Dashboard password").input_value() == ""  # never left on screen
            with engine.connect() as conn:
                assert conn.execute(sa.select(sa.func.count()).select_from(Alert)
                                    .where(Alert.acknowledged_by == "yard supervisor")).scalar_one() == 0
            page.get_by_label("Your name").fill("yard supervisor")
            page.get_by_label("Dashboard password").fill(PASSWORD)
            page.get_by_role("button", name="Acknowledge alert").click()
            page.wait_for_selector("text=Acknowledged:", timeout=30_000)
            _settled(page)
            said = page.locator("[data-testid=stAlertContentSuccess]").inner_text()
            page.screenshot(path=str(ARTIFACTS / "alerts.png"))
        finally:
            browser.close()
    with engine.connect() as conn:
        acked = conn.execute(sa.select(Alert.comparison_name, Alert.state).where(
            Alert.acknowledged_by == "yard supervisor")).all()
    assert len(acked) == 1 and acked[0].state == "acknowledged"
    assert f"Acknowledged: {acked[0].comparison_name} " in said
