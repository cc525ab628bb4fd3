"""Printable reviews of a comparison: the question, the frozen design, every look, the result.

``build_review`` reads the store; ``render_html`` gives one self-contained page; ``html_to_pdf``
prints it with a headless Chromium. Used by ``gapwatch report`` and the dashboard's download.
"""

from .content import CAUTION, LookLine, Review, build_review, z_equivalent
from .html import render_html
from .pdf import find_browser, html_to_pdf

__all__ = ["CAUTION", "LookLine", "Review", "build_review", "z_equivalent", "render_html",
           "find_browser", "html_to_pdf"]
