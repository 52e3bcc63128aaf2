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
    if "yield" in key or "share" in key:
        out.add(f"{100 * value:.1f} %")
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
    # One line per printed page: at least as many A4 pages as lines.
    pages = len(re.findall(rb"/Type\s*/Page(?!s)", pdf))
    assert pages >= len(result["lines"])
