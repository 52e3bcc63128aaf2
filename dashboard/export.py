"""What a table on a page shows, to take away: CSV and Excel (.xlsx) of the same rows.

Excel cells hold no time zone, so times are written as the wall-clock time of the zone the
page shows them in (named in the sheet's header row), never silently as UTC. The workbook is
written by pandas with openpyxl.
"""

from __future__ import annotations

import io
from typing import Any

import pandas as pd
import streamlit as st

__all__ = ["downloads", "to_xlsx"]


def _naive(frame: pd.DataFrame, zone: str) -> tuple[pd.DataFrame, list[str]]:
    out = frame.copy()
    renamed: dict[str, str] = {}
    for col in out.columns:
        if isinstance(out[col].dtype, pd.DatetimeTZDtype):
            out[col] = out[col].dt.tz_convert(zone).dt.tz_localize(None)
            renamed[col] = f"{col} ({zone})"
    return out.rename(columns=renamed), list(renamed.values())


def to_xlsx(frame: pd.DataFrame, zone: str, sheet: str = "data") -> bytes:
    """One sheet, the frame's rows and columns; aware times as ``zone``'s wall clock."""
    naive, _ = _naive(frame, zone)
    buf = io.BytesIO()
    with pd.ExcelWriter(buf, engine="openpyxl") as writer:
        naive.to_excel(writer, sheet_name=sheet[:31], index=False)
    return buf.getvalue()


def downloads(frame: pd.DataFrame, stem: str, zone: str, key: str, **_: Any) -> None:
    """CSV and Excel buttons for ``frame`` (what the table above them shows)."""
    if frame.empty:
        return
    a, b, _rest = st.columns([1, 1, 4])
    a.download_button("CSV", frame.to_csv(index=False).encode(), f"{stem}.csv", "text/csv",
                      key=f"{key}_csv")
    b.download_button("Excel", to_xlsx(frame, zone, stem), f"{stem}.xlsx",
                      "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
                      key=f"{key}_xlsx")
