"""The dashboard's yield page (store-side counts, so a year stays fast) and ``leakfleet report
yield`` (gateway.reports.yields over the rows) must show the same overall figures."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from gateway.cli import main
from tests.dashboard.conftest import AppFactory

pytestmark = pytest.mark.timeout(120)


def test_yield_page_agrees_with_the_report(
    app: AppFactory, demo_journal: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    at = app(demo_journal, "views/yields.py")
    at.selectbox(key="yield_range").set_value("Everything")
    at.run()
    assert not at.exception, [e.message for e in at.exception]
    shown = {m.label: m.value for m in at.metric}

    capsys.readouterr()
    assert main(["report", "yield", "--store", f"sqlite:///{demo_journal}", "--json"]) == 0
    overall = json.loads(capsys.readouterr().out)["result"]["yield"]["overall"]
    assert shown["Tests"] == f"{overall['tests']:,}"
    assert shown["First-pass yield"] == f"{overall['first_pass_yield']:.1%}"
    assert shown["Final yield"] == f"{overall['final_yield']:.1%}"
    assert shown["Test yield"] == f"{overall['test_yield']:.1%}"
