"""Analytics over queried rows that are too slow to redo on every rerun, cached like queries.

Some studies need individual tests (following a part across its retests); they run on rows the
store returns for a bounded range and are cached for a minute, keyed by the same parameters
as the query, so a widget change elsewhere on the page does not recompute them.
"""

from __future__ import annotations

from datetime import datetime

import streamlit as st

from analytics import RetestReport, ShiftCalendar, retest_analysis
from dashboard import data

__all__ = ["retest_report"]


@st.cache_data(ttl=data.HISTORY_TTL, show_spinner="Following parts across their retests…")
def retest_report(
    url: str,
    since: datetime | None,
    until: datetime | None,
    station: str | None,
    timezone: str,
    shifts: tuple[tuple[str, str, str], ...],
) -> RetestReport:
    rows = data.results(url, since, until, station=station)
    return retest_analysis(
        rows, by=("station", "program"), calendar=ShiftCalendar(timezone, shifts)
    )
