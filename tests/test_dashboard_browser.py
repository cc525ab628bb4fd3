"""End to end: `gapwatch dashboard` serving a seeded store, driven by headless Chromium.

The browser is the system's Chromium named by ``$GAPWATCH_CHROMIUM`` (``tests/run.sh`` sets
it); nothing is downloaded. Every page is opened at 1440 and 800 px wide, checked for text a
reader must never see (``None``, ``nan``, ``inf``, a Python repr) and for cut labels, and
photographed into ``docs/screens/`` (the README shows them).
"""

from __future__ import annotations

import os
import re
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
from monitor.store.models import Alert, Comparison, Look
from monitor.store.readback import format_number as fmt
from monitor.vocabulary import STATES

import dashboard_seed
import store_seed

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parent.parent
SCREENS = ROOT / "docs" / "screens"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
PASSWORD = "harbour-light-7"
WIDTHS = (1440, 800)
PAGES = [
    # (screenshot name, address, what shows the page has drawn)
    ("board", "/board", "table.gw-board"),
    ("comparison", "/comparison?name=pick-seconds", ".gw-reading"),
    ("comparison-paired", f"/comparison?name={dashboard_seed.PAIRED}", ".gw-reading"),
    ("alerts", "/alerts", ".gw-alert"),
    ("review", "/review", ".gw-reading"),
]
UNREADABLE = re.compile(r"\b(None|nan|NaN|inf|Infinity)\b|np\.float|Timestamp\(|datetime\.|object at 0x|\{'|\['")


def _chromium():
    path = os.environ.get("GAPWATCH_CHROMIUM")
    if not path or not Path(path).exists():
        pytest.skip("set GAPWATCH_CHROMIUM to a Chromium executable (tests/run.sh does)")
    pytest.importorskip("playwright.sync_api")
    return path


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
    chromium = _chromium()
    url = f"sqlite:///{tmp_path / 'store.sqlite'}"
    store_seed.migrate(url)
    now = datetime.now(timezone.utc)
    info = store_seed.seed_store(url, now=now)
    dashboard_seed.add_paired_days(url, now=now)
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
        yield base, engine, info, chromium
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


@pytest.fixture
def browser(served):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        chromium = p.chromium.launch(executable_path=served[3], args=CHROMIUM_ARGS)
        try:
            yield chromium
        finally:
            chromium.close()


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
        return row["n1"], row["n2"], row["look_number"]


def _settled(page, timeout=60_000):
    """Wait until Streamlit has finished running the script and drawn its placeholders."""
    page.wait_for_function(
        "() => !document.querySelector('[data-testid=stSkeleton]')"
        " && !document.querySelector('[data-testid=stStatusWidget]')",
        timeout=timeout,
    )


def _open(page, base, address, ready):
    page.goto(base + address)
    page.wait_for_selector(ready, timeout=60_000)
    _settled(page)


def _whole_page_screenshot(page, path, width):
    """The whole page, not only the window: the window is stretched to the content's height."""
    height = page.evaluate(
        "() => { const m = document.querySelector('[data-testid=stMain]');"
        " return Math.max(m ? m.scrollHeight : 0, document.documentElement.scrollHeight); }")
    page.set_viewport_size({"width": width, "height": min(int(height) + 40, 8000)})
    page.wait_for_timeout(1200)  # charts redraw to the new size
    page.screenshot(path=str(path))
    page.set_viewport_size({"width": width, "height": 1000})


def _cut_labels(page):
    """Figure labels and values whose text is wider than their box (cut off with an ellipsis)."""
    return page.evaluate(
        "() => [...document.querySelectorAll('[data-testid=stMetricLabel], [data-testid=stMetricValue]')]"
        ".filter(e => e.scrollWidth > e.clientWidth + 1).map(e => e.innerText)")


@pytest.mark.parametrize("width", WIDTHS)
def test_every_page_reads_whole_at_each_width(served, browser, width):
    base, engine, _, _ = served
    SCREENS.mkdir(parents=True, exist_ok=True)
    page = browser.new_page(viewport={"width": width, "height": 1000})
    for name, address, ready in PAGES:
        _open(page, base, address, ready)
        if name.startswith("comparison"):
            page.wait_for_selector("[data-testid=stVegaLiteChart] canvas, [data-testid=stVegaLiteChart] svg",
                                   timeout=60_000)
        assert page.locator("text=Page not found").count() == 0, address
        text = page.locator("[data-testid=stMain]").inner_text()
        assert not UNREADABLE.search(text), (address, UNREADABLE.search(text).group(0))
        assert not _cut_labels(page), (address, width, _cut_labels(page))
        # neither the page nor its HTML tables scroll sideways (narrow screens get cards instead)
        overflow = page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth")
        assert overflow <= 1, (address, width, overflow)
        cut_tables = page.evaluate(
            "() => [...document.querySelectorAll('.gw-scroll')].filter(e => e.scrollWidth > e.clientWidth + 1).length")
        assert cut_tables == 0, (address, width)
        _whole_page_screenshot(page, SCREENS / f"{name}-{width}.png", width)
    page.close()


def test_the_board_refreshes_in_place_and_links_to_each_comparison(served, browser):
    base, engine, _, _ = served
    rows = {r["name"]: r for r in readback.comparison_status(engine)}
    page = browser.new_page(viewport={"width": 1440, "height": 1000})
    _open(page, base, "/", "table.gw-board")
    assert page.url.endswith("/board")  # the root address hands over to the board's own
    board = page.locator("table.gw-board")
    for name, row in rows.items():
        line = board.locator("tr.gw-row", has=page.locator(f"a:text-is('{name}')"))
        text = line.inner_text()
        assert STATES[row["state"]][1] in text
        assert f"{row['n1']:,} / {row['n2']:,}" in text
        if row["estimate"] is not None and row["ci_low"] is not None:
            assert f"{fmt(row['estimate'])} [{fmt(row['ci_low'])}, {fmt(row['ci_high'])}]" in text

    page.get_by_label("Find a comparison").fill("pick")
    page.get_by_label("Find a comparison").press("Enter")
    page.wait_for_function(
        "() => document.querySelectorAll('table.gw-board tr.gw-row').length === 1", timeout=30_000)
    n1, n2, _ = _record_next_look(engine, "pick-seconds", 37)
    page.wait_for_selector(f"table.gw-board >> text={n1:,} / {n2:,}", timeout=40_000)
    assert page.get_by_label("Find a comparison").input_value() == "pick"
    assert page.locator("table.gw-board tr.gw-row").count() == 1

    page.locator("table.gw-board a:text-is('pick-seconds')").click()
    page.wait_for_url("**/comparison?name=pick-seconds**", timeout=30_000)
    page.wait_for_selector(".gw-reading", timeout=60_000)
    _settled(page)
    assert "never replaces, operational judgement" in page.locator(".gw-reading").inner_text()
    assert page.locator("[data-testid=stVegaLiteChart]").count() == 4
    page.close()


def test_the_comparison_page_refreshes_without_losing_its_place(served, browser):
    base, engine, _, _ = served
    page = browser.new_page(viewport={"width": 1440, "height": 1000})
    _open(page, base, "/comparison?name=line-output-shift&version=1", ".gw-reading")
    page.get_by_text("v2 (live)").click()  # a choice the refresh must keep
    page.wait_for_url("**version=2**", timeout=30_000)
    _settled(page)
    page.mouse.wheel(0, 900)
    page.wait_for_timeout(500)
    scrolled = page.evaluate("() => document.querySelector('[data-testid=stMain]').scrollTop")
    looks_tile = page.locator("[data-testid=stMetric]", has=page.get_by_text("Looks", exact=True))
    before = looks_tile.locator("[data-testid=stMetricValue]").inner_text()
    _, _, number = _record_next_look(engine, "line-output-shift", 20)
    page.wait_for_function(
        "n => [...document.querySelectorAll('[data-testid=stMetric]')].some(m =>"
        " m.innerText.startsWith('Looks') && m.querySelector('[data-testid=stMetricValue]').innerText === String(n))",
        arg=number, timeout=40_000)
    assert int(before) == number - 1
    assert "version=2" in page.url
    now = page.evaluate("() => document.querySelector('[data-testid=stMain]').scrollTop")
    assert abs(now - scrolled) < 50  # the reader's place on the page is kept
    page.close()


def test_acknowledging_in_the_browser_keeps_the_alert_after_a_refusal(served, browser):
    base, engine, info, _ = served
    pending = info["pending_alert"]
    page = browser.new_page(viewport={"width": 800, "height": 1000})
    _open(page, base, "/alerts", ".gw-alert")
    card = page.locator("[data-testid=stVerticalBlockBorderWrapper], [data-testid=stVerticalBlock]").filter(
        has=page.get_by_text("events look clustered by day; consider cluster_by")).last
    card.get_by_role("button", name="Acknowledge…").click()
    page.wait_for_selector("text=Dashboard password", timeout=30_000)
    _settled(page)
    page.get_by_label("Your name").fill("yard supervisor")
    page.get_by_label("Dashboard password").fill("harbour-light-8")
    page.get_by_role("button", name="Acknowledge alert").click()
    page.wait_for_selector("text=Wrong password", timeout=30_000)
    _settled(page)
    assert page.get_by_label("Dashboard password").input_value() == ""  # never left on screen
    assert page.get_by_label("Your name").input_value() == "yard supervisor"
    # the form is still under the same alert
    form = page.locator("[data-testid=stForm]")
    assert form.count() == 1
    with engine.connect() as conn:
        assert conn.execute(sa.select(sa.func.count()).select_from(Alert)
                            .where(Alert.acknowledged_by == "yard supervisor")).scalar_one() == 0
    page.get_by_label("Dashboard password").fill(PASSWORD)
    page.get_by_role("button", name="Acknowledge alert").click()
    page.wait_for_selector("text=Acknowledged:", timeout=30_000)
    _settled(page)
    said = page.locator("[data-testid=stAlertContentSuccess]").first.inner_text()
    page.close()
    with engine.connect() as conn:
        acked = conn.execute(sa.select(Alert.id, Alert.comparison_name, Alert.state).where(
            Alert.acknowledged_by == "yard supervisor")).all()
    assert [(a.id, a.state) for a in acked] == [(pending, "acknowledged")]
    assert f"Acknowledged: {acked[0].comparison_name} " in said
