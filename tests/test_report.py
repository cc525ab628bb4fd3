"""Printable reviews: built from real looks, checked in their HTML and as printed PDF pages."""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest
from scipy import special, stats

from live_helpers import LiveWorld, event_rows, insert_events
from monitor.cli import main
from monitor.report import CAUTION, build_review, html_to_pdf, render_html, z_equivalent

UTC = timezone.utc
T0 = datetime(2026, 3, 2, 6, 0, tzinfo=UTC)
CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
FORBIDDEN = re.compile(r"\b(None|nan|NaN|inf|-inf|Infinity)\b|<object|\{'")


@pytest.fixture
def stopped_world(tmp_path):
    """A Welch comparison with a real difference, looked at until it stops."""
    rng = np.random.default_rng(5)
    world = LiveWorld(tmp_path, [], planned_per_group=300, spending="pocock")
    as_of = T0
    for day in range(8):
        rows = event_rows(rng, 60, T0 + timedelta(hours=8 * day), step_minutes=4, east=108.0, west=100.0)
        insert_events(world.source_url, "events", rows)
        as_of = T0 + timedelta(hours=8 * day + 5)
        record = world.look(as_of)
        if record is None or record.decision in ("difference_found", "plan_complete"):
            break
    return world, as_of


@pytest.mark.parametrize("statistic,df,alternative", [(2.5, 4, "two-sided"), (-1.2, 9, "two-sided"),
                                                      (3.1, 2, "greater"), (-2.2, 15, "less")])
def test_z_equivalent_is_the_normal_quantile_of_the_one_sided_p(statistic, df, alternative):
    p = {"two-sided": 2 * stats.t.sf(abs(statistic), df), "greater": stats.t.sf(statistic, df),
         "less": stats.t.cdf(statistic, df)}[alternative]
    one_sided = stats.t.sf(abs(statistic), df)
    expected = math.copysign(float(special.ndtri(1 - one_sided)), statistic)  # scipy reference
    assert z_equivalent(statistic, p, alternative) == pytest.approx(expected, rel=1e-9)
    # a t beyond its z-scale boundary is not necessarily beyond it on the decision's scale
    assert abs(z_equivalent(statistic, p, alternative)) <= abs(statistic) + 1e-12


def test_review_holds_every_look_the_design_and_the_caution(stopped_world):
    world, as_of = stopped_world
    review = build_review(world.engine, "handle-time", now=as_of)
    page = render_html(review)
    assert review.looks and len(review.looks) == len(world.looks())
    for look in review.looks:
        assert f"<td>{look.look}</td>" in page
    assert CAUTION.split(".")[0] in page
    assert "Design as frozen at the first look" in page and "welch" in page
    assert "<svg" in page and "<script" not in page
    if review.stopped:
        assert "Adjusted estimate" in page
    text = re.sub(r"<[^>]+>", " ", page)
    assert not FORBIDDEN.search(text), FORBIDDEN.search(text)


def test_report_command_writes_html_and_refuses_an_unknown_name(stopped_world, tmp_path, capsys):
    world, _ = stopped_world
    out = tmp_path / "review.html"
    assert main(["report", "handle-time", "--config", str(world.config.path), "--output", str(out)]) == 0
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert "wrote" in capsys.readouterr().out
    assert main(["report", "handel-time", "--config", str(world.config.path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "handel-time" in err[0]


@pytest.mark.browser
def test_printed_review_fits_a4_portrait_without_cut_tables(stopped_world, tmp_path):
    if not shutil.which("pdftoppm"):
        pytest.skip("poppler-utils (pdftoppm) is not installed")
    world, as_of = stopped_world
    pdf = html_to_pdf(render_html(build_review(world.engine, "handle-time", now=as_of)), browser=CHROMIUM)
    path = tmp_path / "review.pdf"
    path.write_bytes(pdf)
    info = subprocess.run(["pdfinfo", str(path)], capture_output=True, text=True, check=True).stdout
    assert "(A4)" in info
    width, height = map(float, re.search(r"Page size:\s+([\d.]+) x ([\d.]+)", info).groups())
    assert height > width
    pages = int(re.search(r"Pages:\s+(\d+)", info).group(1))
    assert 1 <= pages <= 6
    subprocess.run(["pdftoppm", "-r", "40", "-gray", str(path), str(tmp_path / "page")], check=True)
    from PIL import Image

    for png in sorted(tmp_path.glob("page*.pgm")) or sorted(tmp_path.glob("page*.png")):
        image = np.asarray(Image.open(png).convert("L"), dtype=float)
        # The right margin (the outer 4 % of the page) must be blank: nothing ran off the paper.
        strip = image[:, int(image.shape[1] * 0.96):]
        assert strip.min() > 200, f"{png.name}: ink in the right margin"
    text = subprocess.run(["pdftotext", "-layout", str(path), "-"], capture_output=True, text=True).stdout
    last = build_review(world.engine, "handle-time", now=as_of).looks[-1]
    assert "Every look" in text and f"{last.look}" in text


@pytest.mark.browser
def test_review_layout_fits_the_printable_width(stopped_world):
    # A4 and Letter leave about 186 mm between the margins (703 CSS px at 96 per inch): with
    # print styles applied at that width nothing may stick out to the right (a cut table).
    playwright = pytest.importorskip("playwright.sync_api")
    world, as_of = stopped_world
    page_html = render_html(build_review(world.engine, "handle-time", now=as_of))
    with playwright.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        try:
            page = browser.new_page(viewport={"width": 703, "height": 1000})
            page.emulate_media(media="print")
            page.set_content(page_html)
            overflow = page.evaluate(
                "() => [...document.querySelectorAll('main *')]"
                ".filter(e => e.getBoundingClientRect().right > document.documentElement.clientWidth + 0.5)"
                ".map(e => e.tagName + ' ' + (e.textContent || '').slice(0, 40))")
        finally:
            browser.close()
    assert overflow == []
