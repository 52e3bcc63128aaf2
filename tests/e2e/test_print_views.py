"""The print views (``?print=1``) of the station and yield pages, printed to PDF by real
Chromium on a running ``leakfleet demo``: no sidebar or widgets, the charts drawn, one or two
A4 or Letter pages each (a handout, not a scroll of screens). PDFs and print-media
screenshots are left for review (``$LEAKFLEET_SCREENSHOTS``, else the test's temp dir)."""

from __future__ import annotations

import io
import re
import time
from pathlib import Path

import pytest

from tests.support.browser import CHROMIUM, CHROMIUM_ARGS, running_demo, screenshot_dir

pytestmark = [
    pytest.mark.e2e,
    pytest.mark.timeout(180),
    pytest.mark.skipif(not CHROMIUM.exists(), reason="Debian chromium is not installed"),
]

PRINTED = [  # (print view, a text it shows once it has data)
    ("station?station=L1-S1&print=1&range=Last+24+hours", "Leak rate against the reject limit"),
    ("yields?print=1&range=Everything&compare=Shift+against+shift", "Rejects, Pareto"),
]


def _pdf_pages(pdf: bytes) -> int:
    """Pages of a PDF: pypdf when installed, else the page objects in the file."""
    try:
        from pypdf import PdfReader
    except ImportError:
        return len(re.findall(rb"/Type\s*/Page(?![s\w])", pdf))
    return len(PdfReader(io.BytesIO(pdf)).pages)


def test_station_and_yield_print_views_fit_a4_and_letter(tmp_path: Path) -> None:
    from playwright.sync_api import sync_playwright

    shots = screenshot_dir(tmp_path, "print-views")
    with running_demo(tmp_path) as demo, sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1000, "height": 1200})
            for path, marker in PRINTED:
                page.goto(demo.url + path, wait_until="domcontentloaded")
                deadline = time.monotonic() + 60
                while page.get_by_text(marker).count() == 0 and time.monotonic() < deadline:
                    page.wait_for_timeout(500)
                    if page.get_by_text("The store holds no records yet").count():
                        page.reload()  # the empty-store message waits for a rerun
                page.wait_for_function(
                    "() => !document.querySelector(\"[data-testid='stStatusWidget']\")",
                    timeout=30_000,
                )
                page.wait_for_selector("[data-testid='stVegaLiteChart'] svg, "
                                       "[data-testid='stVegaLiteChart'] canvas", timeout=30_000)
                page.wait_for_timeout(1500)  # charts finish drawing
                name = path.split("?")[0]
                assert page.locator("[data-testid='stException']").count() == 0, name
                assert page.get_by_text(marker).count() > 0, name
                assert page.get_by_text("Save as PDF").count() > 0, name
                assert not page.locator("[data-testid='stSidebar']").is_visible(), name
                assert not page.locator("[data-testid='stSelectbox']").first.is_visible(), name
                page.emulate_media(media="print")
                page.screenshot(path=str(shots / f"{name}-print.png"), full_page=True)
                page.emulate_media(media="screen")
                for paper in ("A4", "Letter"):
                    pdf = page.pdf(format=paper)
                    (shots / f"{name}-{paper}.pdf").write_bytes(pdf)
                    assert pdf.startswith(b"%PDF"), name
                    assert 1 <= _pdf_pages(pdf) <= 2, (name, paper, _pdf_pages(pdf))
        finally:
            browser.close()
