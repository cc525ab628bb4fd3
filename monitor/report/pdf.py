"""A review's HTML printed to PDF by a headless Chromium (or Chrome) already on the machine."""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from ..errors import InvalidArgumentError

__all__ = ["find_browser", "html_to_pdf"]

_CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")


def find_browser() -> str | None:
    """``$GAPWATCH_CHROMIUM`` if set, else the first Chromium or Chrome on the PATH."""
    named = os.environ.get("GAPWATCH_CHROMIUM")
    if named:
        return named if Path(named).exists() else None
    for name in _CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    return None


def html_to_pdf(html_text: str, *, browser: str | None = None, timeout: float = 120.0) -> bytes:
    """Print ``html_text`` to PDF (the page's own ``@page`` rules set paper and margins)."""
    browser = browser or find_browser()
    if not browser:
        raise InvalidArgumentError(
            "--format pdf needs Chromium or Chrome on this machine (or GAPWATCH_CHROMIUM naming "
            "one); --format html writes the same review, which any browser prints")
    with tempfile.TemporaryDirectory(prefix="gapwatch-review-") as folder:
        page = Path(folder) / "review.html"
        out = Path(folder) / "review.pdf"
        page.write_text(html_text, encoding="utf-8")
        argv = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-pdf-header-footer",
                f"--user-data-dir={Path(folder) / 'profile'}", f"--print-to-pdf={out}", page.as_uri()]
        try:
            proc = subprocess.run(argv, capture_output=True, text=True, timeout=timeout)
        except (OSError, subprocess.TimeoutExpired) as error:
            raise InvalidArgumentError(f"the browser at {browser} could not print the review: {error}") from None
        if not out.exists() or out.stat().st_size == 0:
            last = (proc.stderr or "").strip().splitlines()[-1:] or ["no output"]
            raise InvalidArgumentError(f"the browser at {browser} printed no PDF ({last[0]})")
        return out.read_bytes()
