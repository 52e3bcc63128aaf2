"""The dashboard's shift page and ``leakfleet report shift`` show the same figures: both are
built by gateway.reports.shift (one path, so a figure cannot differ)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.config import load_config
from gateway.reports.common import newest_record_time
from gateway.store import open_store
from tests.dashboard.conftest import AppFactory

pytestmark = pytest.mark.timeout(120)


def test_shift_page_matches_the_cli_report(
    app: AppFactory, demo_journal: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from analytics import ShiftCalendar
    from dashboard.settings import load_settings

    url = f"sqlite:///{demo_journal}"
    calendar: ShiftCalendar = load_settings({"LEAKFLEET_CONFIG": "demo"}).calendar
    store = open_store(url)
    try:
        newest = newest_record_time(store)
    finally:
        store.close()
    assert newest is not None
    found = calendar.shift_of(newest)
    assert found is not None  # the demo's shifts cover the whole day
    day, shift = found
    assert load_config("demo").timezone == calendar.timezone

    at = app(demo_journal, "views/shift.py")
    at.date_input(key="shift_day").set_value(day)
    at.selectbox(key="shift_name").set_value(shift)
    at.run()
    assert not at.exception, [e.message for e in at.exception]
    assert not at.error, [e.value for e in at.error]

    capsys.readouterr()
    assert main(["report", "shift", "--store", url, "--config", "demo", "--date", day.isoformat(),
                 "--shift", shift, "--json"]) == 0  # fmt: skip
    doc = json.loads(capsys.readouterr().out)
    lines = {sec["line"]: sec for sec in doc["result"]["lines"]}
    shown = [s.value for s in at.subheader]
    assert shown and all(s.removeprefix("Line ") in lines for s in shown)
    metrics = [m.value for m in at.metric]
    expected: list[str] = []
    for title in shown:
        sec = lines[title.removeprefix("Line ")]
        pct = [None if v is None else f"{100 * v:.1f} %" for v in
               (sec["first_pass_yield"], sec["final_yield"], sec["retests"]["share"])]
        expected += [f"{sec['tests']:,}", f"{sec['parts']:,}", *(p or "–" for p in pct)]
    assert metrics == expected
    assert any(sec["tests"] for sec in lines.values())
