"""Shift report: one shift's figures per line, the same report ``leakfleet report shift`` prints
(both are built by gateway.reports.shift, so a figure cannot differ), and its printable page."""

from __future__ import annotations

import sqlite3
from datetime import timedelta

import streamlit as st

from dashboard import data
from dashboard.common import page, pick
from gateway.errors import LeakfleetError
from gateway.reports.shift import ShiftOptions, shift_report_of

p = page("Shift report")
calendar = p.calendar
current = calendar.shift_of(p.now)
today = p.now.astimezone(calendar.tz).date()
c1, c2, c3 = st.columns(3)
with c1:
    day = st.date_input("Production date", value=current[0] if current else today,
                        max_value=today + timedelta(days=1), key="shift_day")
with c2:
    names = calendar.names
    shift = st.selectbox("Shift", names, key="shift_name",
                         index=names.index(current[1]) if current else 0)
with c3:
    line = pick("Line", sorted(p.stations["line"].dropna().astype(str).unique()), "shift_line")

try:
    report = shift_report_of(
        data.query_store(p.url), calendar,
        ShiftOptions(day=day, shift=shift, line=line, standards=p.settings.standards,
                     config_source=p.settings.config_source),
    )  # fmt: skip
except (data.StoreUnavailable, LeakfleetError, sqlite3.Error, OSError) as exc:
    st.error(f"Store unavailable: {exc}")
    st.stop()
r = report.result
if not r["has_data"]:
    st.info(r["note"] or "No tests in this shift.")


def _pct(value: float | None) -> str:
    return "–" if value is None else f"{100 * value:.1f} %"


for sec in r["lines"]:
    st.subheader(f"Line {sec['line']}")
    m1, m2, m3, m4, m5 = st.columns(5)
    m1.metric("Tests", f"{sec['tests']:,}")
    m2.metric("Parts", f"{sec['parts']:,}")
    m3.metric("First-pass yield", _pct(sec["first_pass_yield"]))
    m4.metric("Final yield", _pct(sec["final_yield"]))
    m5.metric("Passes after retest", _pct(sec["retests"]["share"]))
    if sec["rejects"]["rows"]:
        st.dataframe(
            [{"reason": x["category"], "tests": x["n"], "share": _pct(x["share"])}
             for x in sec["rejects"]["rows"]],
            hide_index=True, width="stretch", key=f"shift_rejects_{sec['line']}",
        )  # fmt: skip
    for a in sec["alarms"]:
        st.warning(f"{a['station']}: {a['message']}")

st.download_button(
    "Printable page (HTML)", report.to_html(), file_name=f"shift-{day}-{shift}.html",
    mime="text/html", key="shift_html",
)  # fmt: skip
with st.expander("Text"):
    st.code(report.to_text(), language=None)
