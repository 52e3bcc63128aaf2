"""The shift report's HTML page in the real headless Chromium: no requests, numbers = JSON.

Every figure on the page carries ``data-path`` (its place in the JSON ``result``) and
``data-value``; read from the DOM, each must equal the ``--json`` document, and the visible
text must be that value formatted. The page must load with no request but the file itself, and
print to PDF with one line per page.
"""

from __future__ import annotations

import json
import os
import re
from pathlib import Path
from typing import Any

import pytest
from shift_journal import write_journal

from gateway.cli import main

CHROMIUM = Path("/usr/bin/chromium")
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--no-first-run"]  # fmt: skip

if not CHROMIUM.exists() and os.environ.get("CI") != "true":
    pytest.skip(f"{CHROMIUM} is not installed (on CI it must be)", allow_module_level=True)
pytest.importorskip("gateway.store", reason="the store package is not part of this build")
sync_api = pytest.importorskip("playwright.sync_api")
pytestmark = pytest.mark.timeout(90)


def _at(doc: Any, path: str) -> Any:
    for part in path.split("/"):
        doc = doc[int(part)] if isinstance(doc, list) else doc[part]
    return doc


def _shown(value: Any, key: str) -> set[str]:
    """Ways the page may print ``value`` (counts as integers, shares as percentages)."""
    if value is None:
        return {"–"}
    if isinstance(value, bool):
        return {"yes" if value else "no"}
    if isinstance(value, int):
        return {str(value)}
    if isinstance(value, str):
        return {value}
    out = {format(value, ".4g"), f"{value:g}"}
    if "yield" in key or "share" in key or key in ("this", "previous", "target"):
        out |= {f"{100 * value:.1f} %", f"{value:.0f}"}  # a comparison's share, or its tests
    if key in ("change", "versus_target"):  # percentage points, or a signed count of tests
        out |= {f"{100 * value:+.1f} pp", f"{value:+.0f}"}
    return out


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Any]]:
    directory = tmp_path_factory.mktemp("browser")
    url = write_journal(directory)
    page = directory / "night.html"
    out = directory / "night.json"
    argv = ["report", "shift", "--store", url, "--standards", str(directory / "standards.csv"),
            "--timezone", "Europe/Berlin", "--date", "2026-01-14", "--shift", "night",
            "--html", str(page), "--json"]  # fmt: skip
    import contextlib
    import io

    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        assert main(argv) == 0
    out.write_text(buffer.getvalue())
    return page, json.loads(buffer.getvalue())


def test_page_in_chromium_matches_json(
    report: tuple[Path, dict[str, Any]], tmp_path: Path
) -> None:
    page_file, doc = report
    result = doc["result"]
    url = page_file.resolve().as_uri()
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        try:
            page = browser.new_page(viewport={"width": 900, "height": 1200})
            requests: list[str] = []
            page.on("request", lambda r: requests.append(r.url))
            page.goto(url, wait_until="load")
            figures = page.eval_on_selector_all(
                "[data-path]",
                "els => els.map(e => [e.dataset.path, e.dataset.value, e.textContent.trim()])",
            )
            lines = page.eval_on_selector_all("section.line", "els => els.map(e => e.dataset.line)")
            notice = page.locator("p.notice").count()
            page.screenshot(path=str(tmp_path / "night.png"), full_page=True)
            pdf = page.pdf(prefer_css_page_size=True)
        finally:
            browser.close()

    assert requests == [url]  # the file itself, nothing else
    assert lines == [sec["line"] for sec in result["lines"]]
    assert notice == 1  # line L2 did not test in this shift, and the page says so
    seen = {}
    for path, raw, text in figures:
        value = json.loads(raw)
        assert value == _at(result, path), path
        assert text in _shown(value, path.rsplit("/", 1)[-1]), (path, text)
        seen[path] = value
    # The headline figures of every line are on the page.
    for i, sec in enumerate(result["lines"]):
        for key in ("tests", "parts", "first_pass", "final_pass", "first_pass_yield",
                    "final_yield", "aborted", "tests_without_part_id", "retests/passes",
                    "retests/passed_after_retest", "retests/share", "rejects/total"):  # fmt: skip
            assert f"lines/{i}/{key}" in seen, key
        for j, _ in enumerate(sec["rejects"]["rows"]):
            assert f"lines/{i}/rejects/rows/{j}/n" in seen
        for j, _ in enumerate(sec["stations"]):
            assert f"lines/{i}/stations/{j}/calibration_state" in seen
        for j, _ in enumerate(sec["standards"]):
            assert f"lines/{i}/standards/{j}/days_left" in seen
    assert seen["lines/0/first_pass_yield"] == pytest.approx(4 / 7)
    # One line per printed page (the page objects of the PDF counted)
    pages = len(re.findall(rb"/Type\s*/Page(?!s)", pdf))
    assert pages == len(result["lines"])


def _print(html: Path, paper: str) -> bytes:
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        try:
            page = browser.new_page()
            page.goto(html.resolve().as_uri(), wait_until="load")
            return page.pdf(prefer_css_page_size=True)
        finally:
            browser.close()


@pytest.mark.parametrize("paper", ["a4", "letter"])
def test_two_line_plant_prints_one_page_per_line(tmp_path: Path, paper: str) -> None:
    """Printed by Chromium's print-to-PDF: exactly one page per line, each naming the site,
    its line and page, with the sign-off block, full reason labels, the comparison, the
    journal's alarm state and the chosen units."""
    import contextlib
    import io
    from datetime import UTC, datetime

    import pint
    pypdf = pytest.importorskip("pypdf")

    from analytics.alarms import Condition, transitions
    from gateway.store import open_journal
    from gateway.store.logbook import Logbook

    url = write_journal(tmp_path)
    with open_journal(url) as j:  # an alarm acknowledged in the night shift, still open
        book = Logbook(j)
        at = datetime(2026, 1, 14, 23, 0, tzinfo=UTC)
        book.apply(transitions([Condition("reject-streak:L1-S1", "reject-streak", "L1-S1",
                                          "alarm", at, "3 rejects in a row")], []), at)
        book.acknowledge(book.open_alarms()[0].id, "J. Doe", at)
    html = tmp_path / f"night-{paper}.html"
    argv = ["report", "shift", "--store", url, "--standards", str(tmp_path / "standards.csv"),
            "--timezone", "Europe/Berlin", "--date", "2026-01-14", "--shift", "night",
            "--site", "Northmere Works", "--target-yield", "95", "--pressure-unit", "kPa",
            "--leak-unit", "mbar*L/s", "--paper", paper, "--html", str(html)]  # fmt: skip
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert main(argv) == 0
    pdf = pypdf.PdfReader(io.BytesIO(_print(html, paper)))
    texts = [" ".join(p.extract_text().split()) for p in pdf.pages]
    assert len(texts) == 2  # two lines, two pages
    for n, text in enumerate(texts, 1):
        assert f"Line L{n} — page {n} of 2" in text
        assert f"sheet {n} of 2" in text  # the @page margin box's counters, as Chromium prints
        assert "Northmere Works" in text and "Comments, handover notes" in text
        assert "Shift leader (name, signature)" in text and "Received by, next shift" in text
        assert "previous" in text and "target 95.0 %" in text
        assert "[kPa]" in text and "mbar·L/s" in text
    l1 = texts[0]
    for reason in ("leak above limit", "gross leak", "no part seated"):  # whole labels
        assert reason in l1
    assert "acknowledged (1)" in l1 and "J. Doe" in l1 and "reject-streak" in l1
    assert "previous 50.0 % (+7.1 pp)" in l1  # 4/7 against the late shift's 1/2
    # LS-101's nominal 5 sccm in mbar·L/s; reference: pint, 1 sccm = 1 cm³/min at 1013.25 mbar
    # (0 °C standard conditions, the project's canonical leak unit)
    u = pint.UnitRegistry()
    nominal = (5 * u("cm**3/min") * 1013.25 * u.mbar).to("mbar * L / s").magnitude
    assert f"{nominal:.4g}" in l1
