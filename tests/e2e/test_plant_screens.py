"""The plant's screens as people see them: the demo with its faults on, in real Chromium.

A test engineer on a line PC (1024×768) and a wall screen (1920×1080), in a browser whose
time zone (America/Chicago) is not the plant's (Europe/Berlin): every page opens without an
error box and without pushing the page sideways; the fleet's alarm list is the journal's
(what ``leakfleet alarms list`` prints); a chart's tooltip, the table beside it and the Excel
file downloaded from it give the newest test the same time; each line's tiles are worst first
and say their level in words; nothing but this machine is asked for anything; Ctrl-C stops
the demo cleanly. Screenshots of every page at both
sizes are left for review (``$LEAKFLEET_SCREENSHOTS``, else the test's temp dir).
"""

from __future__ import annotations

import json
import re
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pytest

from tests.support.browser import (
    CHROMIUM,
    CHROMIUM_ARGS,
    REPO,
    Demo,
    running_demo,
    screenshot_dir,
)

SIZES = ((1024, 768), (1920, 1080))
PAGES = [  # (navigation entry, a text the page shows once it has data)
    ("Fleet live", "cycles in the last hour"),
    ("Station", "Leak rate against the reject limit"),
    ("Yield", "First-pass yield"),
    ("Shift report", "Shift report"),
    ("Readings vs limits", "Ppu"),
    ("Calibration", "Calibrations"),
    ("Gauge study & test time", "qualified person"),
    ("Pressure traces", "Back-down map"),
    ("Quality", "Part history"),
    ("Data", "Download CSV"),
    ("Gateway & sink health", "Quarantined lines, 24 h"),
]
STAMP = re.compile(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2}")

pytestmark = [
    pytest.mark.e2e,
    pytest.mark.timeout(420),
    pytest.mark.skipif(not CHROMIUM.exists(), reason="Debian chromium is not installed"),
]


def _cli_alarms(demo: Demo) -> dict[int, dict[str, Any]]:
    out = subprocess.run(
        [sys.executable, "-m", "gateway", "alarms", "--store", demo.journal, "list", "--json"],
        cwd=REPO, capture_output=True, text=True, timeout=60, check=True,
    ).stdout  # fmt: skip
    return {a["id"]: a for a in map(json.loads, out.splitlines())}


def _wait_for_alarms(demo: Demo) -> None:
    deadline = time.monotonic() + 150
    while not _cli_alarms(demo):
        assert demo.proc.poll() is None, demo.output()
        assert time.monotonic() < deadline, "the faulty demo raised no alarm"
        time.sleep(3)


def _open(page: Any, title: str, marker: str) -> None:
    page.locator("[data-testid='stSidebarNav'] a", has_text=title).first.click()
    deadline = time.monotonic() + 40
    while page.get_by_text(marker).count() == 0 and time.monotonic() < deadline:
        page.wait_for_timeout(500)
    page.wait_for_function(
        "() => !document.querySelector(\"[data-testid='stStatusWidget']\")", timeout=30_000
    )
    page.wait_for_timeout(800)  # charts finish drawing


def _table(page: Any, heading: str, nth: int = 0) -> Any:
    """The ``nth`` table (``st.dataframe``) after the heading or bold label ``heading``."""
    return page.locator(
        "xpath=//div[@data-testid='stElementContainer']"
        f"[.//*[self::h3 or self::strong][normalize-space()='{heading}']]"
        "/following-sibling::div[@data-testid='stElementContainer']"
        "[.//div[@data-testid='stDataFrame']]"
    ).nth(nth).locator("[data-testid='stDataFrame']")


def _column(grid: Any, header: str) -> list[str]:
    """The cells of one column of a table (``st.dataframe``'s grid keeps an accessible copy
    of the visible cells; columns are matched by their ``aria-colindex``)."""
    grid.locator("[role='gridcell']").first.wait_for(state="attached", timeout=30_000)
    heads = grid.locator("[role='columnheader']")
    index = None
    for i in range(heads.count()):
        if heads.nth(i).inner_text().strip() == header:
            index = heads.nth(i).get_attribute("aria-colindex")
    assert index is not None, (header, heads.all_inner_texts())
    return [c.strip() for c in
            grid.locator(f"[role='gridcell'][aria-colindex='{index}']").all_inner_texts()]


LEVEL_WORDS = ["ALARM", "OFFLINE", "WARNING", "OK", "NO DATA"]  # analytics.fleet.LEVELS order
BADGE = re.compile(r"[▲■◆●○] (ALARM|OFFLINE|WARNING|OK|NO DATA)")


def _worst_first(page: Any) -> None:
    """Every tile names its level in words beside the colour, worst first within each line."""
    blocks = page.locator("[data-testid='stHeading'], [data-testid='stMarkdownContainer']")
    lines: list[list[int]] = []
    for text in (t.strip() for t in blocks.all_inner_texts()):
        if text.startswith("Line "):
            lines.append([])
        for part in text.splitlines():
            m = BADGE.search(part)
            if m and lines:
                lines[-1].append(LEVEL_WORDS.index(m.group(1)))
    assert sum(len(x) for x in lines) >= 6, lines  # one badge per demo station
    for ranks in lines:
        assert ranks == sorted(ranks), lines


def test_plant_screens_with_faults(tmp_path: Path) -> None:
    from playwright.sync_api import sync_playwright

    shots = screenshot_dir(tmp_path, "plant-screens")
    with running_demo(tmp_path, "--faults", seconds=400) as demo, sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        context = browser.new_context(timezone_id="America/Chicago", accept_downloads=True,
                                      viewport={"width": 1024, "height": 768})  # fmt: skip
        page = context.new_page()
        requests: list[str] = []
        page.on("request", lambda r: requests.append(r.url))
        page.goto(demo.url, wait_until="domcontentloaded")
        page.wait_for_selector("[data-testid='stApp']", timeout=30_000)
        _wait_for_alarms(demo)
        page.reload()
        page.wait_for_selector("[data-testid='stSidebarNav']", timeout=30_000)

        # every page at both sizes: no error box, nothing wider than the window
        for width, height in SIZES:
            page.set_viewport_size({"width": width, "height": height})
            for title, marker in PAGES:
                _open(page, title, marker)
                name = title.split()[0].lower()
                page.screenshot(path=str(shots / f"{width}x{height}-{name}.png"),
                                full_page=True)  # fmt: skip
                assert page.locator("[data-testid='stException']").count() == 0, name
                assert page.get_by_text(marker).count() > 0, f"{name}: {marker!r} not shown"
                assert page.get_by_text("pressure ratings").count() > 0, name  # safety note
                if title == "Fleet live":
                    _worst_first(page)
                sideways = page.evaluate(
                    "() => document.documentElement.scrollWidth - window.innerWidth")
                assert sideways <= 1, f"{name} at {width}x{height} scrolls sideways by {sideways}px"

        # the fleet's alarm list is the journal's: every alarm open before and after the page
        # was read is on it, and nothing else is
        _open(page, "Fleet live", "cycles in the last hour")
        before = _cli_alarms(demo)
        page.reload()
        page.get_by_text("cycles in the last hour").first.wait_for(timeout=30_000)
        alarms = _table(page, "Alarms")
        shown = {int(x) for x in _column(alarms, "No.") if x}
        after = _cli_alarms(demo)
        assert set(before) & set(after) <= shown, (before, after, shown)
        assert shown <= set(before) | set(after), (before, after, shown)
        stations = set(_column(alarms, "Station"))
        assert {a["station"] or "" for a in before.values()} & stations
        # the demo's gateway runs on the plant's fast clock: only the station whose clock the
        # faults set wrong is said to run ahead, and no station is silent for that reason
        clocks = {a["station"] for a in after.values() if a["rule"] == "clock"}
        assert len(clocks) <= 1, after
        silent = [a for a in after.values() if a["rule"] == "silent"]
        assert len(silent) < 6, silent

        # one clock: the newest test's time in the history chart's tooltip, in the table
        # beside it and in the Excel file downloaded from that table
        detail = page.locator("[data-testid='stVerticalBlock']").filter(
            has=page.get_by_text("Station detail")).last
        chart = detail.locator("[data-testid='stVegaLiteChart']").first
        marks = chart.locator("path[role='graphics-symbol']")
        labels = marks.evaluate_all("els => els.map(e => e.getAttribute('aria-label') || '')")
        stamps = [m.group(0) if (m := STAMP.search(a)) else "" for a in labels]
        assert any(stamps), labels[:3]
        newest = max(stamps)
        marks.nth(stamps.index(newest)).hover(force=True)
        tooltip = page.locator("#vg-tooltip-element")
        tooltip.wait_for(state="visible", timeout=5_000)
        assert newest in tooltip.inner_text()
        table_first = _column(_table(page, "Station detail"), "ended_at")[0]
        assert table_first.startswith(newest), (table_first, newest)
        with page.expect_download() as got:
            page.locator(".st-key-fleet_latest_xlsx button").click()
        path = tmp_path / "latest.xlsx"
        got.value.save_as(path)
        import pandas as pd

        sheet = pd.read_excel(path, engine="openpyxl")  # the file opens with openpyxl
        first = pd.Timestamp(sheet.iloc[0, 0])
        assert f"{first:%Y-%m-%d %H:%M:%S}" == newest, (sheet.head(2), newest)
        page.screenshot(path=str(shots / "fleet-tooltip.png"))
        browser.close()
        # nothing but this machine was asked for anything
        assert all(r.startswith(("http://127.0.0.1", "ws://127.0.0.1", "data:", "blob:"))
                   for r in requests), [r for r in requests if "127.0.0.1" not in r][:5]
        demo.proc.send_signal(signal.SIGINT)  # Ctrl-C stops plant, gateway and dashboard
        assert demo.proc.wait(timeout=30) == 0
    out = demo.output()
    assert "stopped:" in out and "Traceback" not in out, out[-3000:]
