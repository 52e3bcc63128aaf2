"""Taking a page's table away: the Excel file holds the same rows, times on the page's clock."""

from __future__ import annotations

import io
from datetime import datetime
from pathlib import Path

import openpyxl
import pandas as pd

from dashboard.export import to_xlsx
from tests.dashboard.conftest import AppFactory


def test_excel_holds_the_rows_with_times_as_the_pages_wall_clock() -> None:
    frame = pd.DataFrame({
        "ended_at": pd.to_datetime(["2026-12-03 06:15:09", "2026-07-03 06:15:09"], utc=True),
        "station": ["L1-S1", "L2-S1"], "leak_rate_sccm": [0.213, 1.5], "cycle": [1042, 7],
    })  # fmt: skip
    book = openpyxl.load_workbook(io.BytesIO(to_xlsx(frame, "Europe/Berlin", "results")))
    sheet = book["results"]
    rows = list(sheet.iter_rows(values_only=True))
    assert rows[0] == ("ended_at (Europe/Berlin)", "station", "leak_rate_sccm", "cycle")
    # Berlin is UTC+1 in December and UTC+2 in July (IANA tz database)
    assert rows[1] == (datetime(2026, 12, 3, 7, 15, 9), "L1-S1", 0.213, 1042)
    assert rows[2] == (datetime(2026, 7, 3, 8, 15, 9), "L2-S1", 1.5, 7)


def test_the_yield_page_offers_its_table_as_csv_and_excel(app: AppFactory,
                                                          demo_journal: Path) -> None:
    at = app(demo_journal, "views/yields.py", clock="data")
    assert not at.exception, [e.message for e in at.exception]
    labels = [b.proto.label for b in at.get("download_button")]
    assert "CSV" in labels and "Excel" in labels
