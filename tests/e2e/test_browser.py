"""A real browser on a running ``leakfleet demo``: every page renders, with no error box.

Debian's Chromium (``/usr/bin/chromium``, installed by scripts/test-services.sh; never a browser
download) driven by Playwright. The demo runs as a user would start it, on free ports with its
run directory in the test's temp dir, and is stopped with SIGINT (Ctrl-C) at the end, which
must stop the plant, the gateway and the dashboard cleanly. Screenshots land in the temp dir.
"""

from __future__ import annotations

import signal
import subprocess
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.support.browser import CHROMIUM, CHROMIUM_ARGS, running_demo

ARGS = CHROMIUM_ARGS
PAGES = [  # (navigation entry, a text the page shows once it has data)
    ("Fleet live", "cycles in the last hour"),
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


@pytest.fixture()
def demo(tmp_path: Path) -> Iterator[tuple[str, subprocess.Popen[str]]]:
    with running_demo(tmp_path) as d:
        yield d.url, d.proc


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
