"""A real browser on a running ``leakfleet demo``: every page renders, with no error box.

Debian's Chromium (``/usr/bin/chromium``, installed by scripts/test-services.sh; never a browser
download) driven by Playwright. The demo runs as a user would start it, on free ports with its
run directory in the test's temp dir, and is stopped with SIGINT (Ctrl-C) at the end, which
must stop the plant, the gateway and the dashboard cleanly. Screenshots land in the temp dir.
"""

from __future__ import annotations

import io
import os
import re
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

CHROMIUM = Path("/usr/bin/chromium")
REPO = Path(__file__).resolve().parents[2]
ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run",
]  # fmt: skip
PAGES = [  # (navigation entry, a text the page shows once it has data)
    ("Fleet live", "cycles in the last hour"),
    ("Station", "Leak rate against the reject limit"),
    ("Yield", "First-pass yield"),
    ("Readings vs limits", "Ppu"),
    ("Calibration", "Calibrations"),
    ("Gauge study & test time", "qualified person"),
    ("Pressure traces", "Back-down map"),
    ("Quality", "Part history"),
    ("Data", "Download CSV"),
    ("Gateway & sink health", "Quarantined lines, 24 h"),
]

pytestmark = [
    pytest.mark.e2e,
    pytest.mark.timeout(150),
    pytest.mark.skipif(not CHROMIUM.exists(), reason="Debian chromium is not installed"),
]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture()
def demo(tmp_path: Path) -> Iterator[tuple[str, subprocess.Popen[str]]]:
    port = _free_port()
    log = (tmp_path / "demo.out").open("w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "gateway", "demo", "--port", str(port), "--speed", "120",
         "--free-ports", "--run-dir", str(tmp_path / "run"), "--seconds", "120"],
        cwd=REPO, stdout=log, stderr=subprocess.STDOUT, text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1"},
    )  # fmt: skip
    url = f"http://127.0.0.1:{port}/"
    try:
        deadline = time.monotonic() + 60
        while "dashboard: http" not in (tmp_path / "demo.out").read_text():
            assert proc.poll() is None, (tmp_path / "demo.out").read_text()
            assert time.monotonic() < deadline, "the demo did not print its URL"
            time.sleep(0.2)
        yield url, proc
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGINT)
            try:
                proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        log.close()


LEVEL_WORDS = ["ALARM", "OFFLINE", "WARNING", "OK", "NO DATA"]  # analytics.fleet.LEVELS order


def _fleet_at_a_glance(page: object, shots: Path) -> None:
    """The fleet page on a line PC (1024×768) and a wall screen (1920×1080): every tile names
    its level in words beside the colour, worst first within each line."""
    import re

    pattern = re.compile(r"^[▲■◆●○] (ALARM|OFFLINE|WARNING|OK|NO DATA)$")
    page.locator("[data-testid='stSidebarNav'] a", has_text="Fleet live").first.click()  # type: ignore[attr-defined]
    for width, height in ((1024, 768), (1920, 1080)):
        page.set_viewport_size({"width": width, "height": height})  # type: ignore[attr-defined]
        page.wait_for_timeout(1500)  # type: ignore[attr-defined]
        page.screenshot(path=str(shots / f"fleet-{width}x{height}.png"), full_page=True)  # type: ignore[attr-defined]
        blocks = page.locator("[data-testid='stHeading'], [data-testid='stMarkdownContainer']")  # type: ignore[attr-defined]
        texts = [t.strip() for t in blocks.all_inner_texts()]
        lines: list[list[int]] = []
        for text in texts:
            if text.startswith("Line "):
                lines.append([])
            for part in text.splitlines():
                m = pattern.match(part.split("  ")[-1].strip()) or re.search(
                    r"[▲■◆●○] (ALARM|OFFLINE|WARNING|OK|NO DATA)", part)
                if m and lines:
                    lines[-1].append(LEVEL_WORDS.index(m.group(1)))
        assert sum(len(x) for x in lines) >= 6, texts[:20]  # one badge per demo station
        for ranks in lines:
            assert ranks == sorted(ranks), (width, lines)


def test_every_page_renders_in_chromium(demo: tuple[str, subprocess.Popen[str]],
                                        tmp_path: Path) -> None:  # fmt: skip
    from playwright.sync_api import sync_playwright

    url, proc = demo
    shots = tmp_path / "screenshots"
    shots.mkdir()
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            requests: list[str] = []
            page.on("request", lambda r: requests.append(r.url))
            page.goto(url, wait_until="domcontentloaded")
            page.wait_for_selector("[data-testid='stApp']", timeout=30_000)
            for title, marker in PAGES:
                # through the sidebar, as a user does (one session, no reloads)
                page.locator("[data-testid='stSidebarNav'] a", has_text=title).first.click()
                # the plant needs a few simulated minutes before every page has something
                deadline = time.monotonic() + 40
                while page.get_by_text(marker).count() == 0 and time.monotonic() < deadline:
                    page.wait_for_timeout(500)
                    if page.get_by_text("The store holds no records yet").count():
                        page.reload()  # the empty-store message waits for a rerun
                page.wait_for_function(
                    "() => !document.querySelector(\"[data-testid='stStatusWidget']\")",
                    timeout=30_000,
                )
                page.wait_for_timeout(1000)  # charts and widgets finish drawing
                name = title.split()[0].lower()
                page.screenshot(path=str(shots / f"{name}.png"), full_page=True)
                assert page.locator("[data-testid='stException']").count() == 0, name
                assert page.get_by_text(marker).count() > 0, f"{name}: {marker!r} not shown"
                assert page.get_by_text("pressure ratings").count() > 0, name  # safety note
            _fleet_at_a_glance(page, shots)
        finally:
            browser.close()
    # nothing but this machine was asked for anything
    assert all(r.startswith(("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:"))
               for r in requests), [r for r in requests if "127.0.0.1" not in r][:5]  # fmt: skip
    proc.send_signal(signal.SIGINT)
    assert proc.wait(timeout=30) == 0
    out = (tmp_path / "demo.out").read_text()
    assert "stopped:" in out and "Traceback" not in out, out


def _pdf_pages(pdf: bytes) -> int:
    """Pages of a PDF: pypdf when installed, else the page objects in the file."""
    try:
        from pypdf import PdfReader
    except ImportError:
        return len(re.findall(rb"/Type\s*/Page(?![s\w])", pdf))
    return len(PdfReader(io.BytesIO(pdf)).pages)


PRINTED = [  # (print view, a text it shows once it has data)
    ("station?station=L1-S1&print=1&range=Last+24+hours", "Leak rate against the reject limit"),
    ("yields?print=1&range=Everything&compare=Shift+against+shift", "Rejects, Pareto"),
]


def test_station_and_yield_print_views_fit_a4(demo: tuple[str, subprocess.Popen[str]],
                                              tmp_path: Path) -> None:  # fmt: skip
    """The print views printed by Chromium to A4 PDF: no sidebar or widgets, the charts
    drawn, one or two pages each (a manager's handout, not a scroll of screens)."""
    from playwright.sync_api import sync_playwright

    url, _proc = demo
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        try:
            page = browser.new_page(viewport={"width": 1000, "height": 1200})
            for path, marker in PRINTED:
                page.goto(url + path, wait_until="domcontentloaded")
                deadline = time.monotonic() + 60
                while page.get_by_text(marker).count() == 0 and time.monotonic() < deadline:
                    page.wait_for_timeout(500)
                    if page.get_by_text("The store holds no records yet").count():
                        page.reload()
                page.wait_for_function(
                    "() => !document.querySelector(\"[data-testid='stStatusWidget']\")",
                    timeout=30_000,
                )
                page.wait_for_selector("[data-testid='stVegaLiteChart'] canvas, "
                                       "[data-testid='stVegaLiteChart'] svg", timeout=30_000)
                page.wait_for_timeout(1500)
                name = path.split("?")[0]
                assert page.locator("[data-testid='stException']").count() == 0, name
                assert page.get_by_text(marker).count() > 0, name
                assert page.get_by_text("Save as PDF").count() > 0, name
                assert not page.locator("[data-testid='stSidebar']").is_visible(), name
                assert not page.locator("[data-testid='stSelectbox']").first.is_visible(), name
                page.emulate_media(media="print")
                page.screenshot(path=str(tmp_path / f"{name}-print.png"), full_page=True)
                pdf = page.pdf(format="A4")
                page.emulate_media(media="screen")
                (tmp_path / f"{name}.pdf").write_bytes(pdf)
                assert pdf.startswith(b"%PDF"), name
                assert 1 <= _pdf_pages(pdf) <= 2, (name, _pdf_pages(pdf))
        finally:
            browser.close()
