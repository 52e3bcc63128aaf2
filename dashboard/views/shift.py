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
c1, c2, c3, c4 = st.columns(4)
with c1:
    day = st.date_input("Production date", value=current[0] if current else today,
                        max_value=today + timedelta(days=1), key="shift_day")
with c2:
    names = calendar.names
    shift = st.selectbox("Shift", names, key="shift_name",
                         index=names.index(current[1]) if current else 0)
with c3:
    line = pick("Line", sorted(p.stations["line"].dropna().astype(str).unique()), "shift_line")
with c4:
    target = st.number_input("First-pass yield target (%)", min_value=0.0, max_value=100.0,
                             value=None, step=0.5, key="shift_target",
                             help="Shown beside each line's first-pass yield; none by default.")

try:
    report = shift_report_of(
        data.query_store(p.url), calendar,
        ShiftOptions(day=day, shift=shift, line=line, standards=p.settings.standards,
                     config_source=p.settings.config_source, site=p.settings.site,
                     target_first_pass_yield=None if not target else target / 100,
                     pressure_unit=p.units.pressure, leak_unit=p.units.leak),
    )  # fmt: skip
except (data.StoreUnavailable, LeakfleetError, sqlite3.Error, OSError) as exc:
    st.error(f"Store unavailable: {exc}")
    st.stop()
r = report.result
if not r["has_data"]:
    st.info(r["note"] or "No tests in this shift.")


def _pct(value: float | None) -> str:
    return "–" if value is None else f"{100 * value:.1f} %"


def _points(value: float | None) -> str | None:
    return None if value is None else f"{100 * value:+.1f} pp"


if r.get("previous_shift"):
    st.caption(f"Changes are against the previous shift, {r['previous_shift']}.")
for sec in r["lines"]:
    st.subheader(f"Line {sec['line']}")
    change = {c["figure"]: c for c in sec.get("comparison", [])}
    m1, m2, m3, m4, m5 = st.columns(5)
    tests_change = change.get("tests", {}).get("change")
    m1.metric("Tests", f"{sec['tests']:,}",
              delta=None if tests_change is None else f"{tests_change:+.0f}")
    m2.metric("Parts", f"{sec['parts']:,}")
    m3.metric("First-pass yield", _pct(sec["first_pass_yield"]),
              delta=_points(change.get("first_pass_yield", {}).get("change")))
    m4.metric("Final yield", _pct(sec["final_yield"]),
              delta=_points(change.get("final_yield", {}).get("change")))
    m5.metric("Passes after retest", _pct(sec["retests"]["share"]),
              delta=_points(change.get("retest_share", {}).get("change")), delta_color="inverse")
    fpy = change.get("first_pass_yield", {})
    if fpy.get("target") is not None:
        met = "reached" if fpy["met"] else "missed"
        st.caption(f"First-pass yield target {_pct(fpy['target'])}: {met} "
                   f"({_points(fpy['versus_target'])}).")
    if sec["rejects"]["rows"]:
        st.dataframe(
            [{"Reject reason": x["category"], "Tests": x["n"], "Share": _pct(x["share"])}
             for x in sec["rejects"]["rows"]],
            hide_index=True, width="stretch", key=f"shift_rejects_{sec['line']}",
        )  # fmt: skip
    st.dataframe(
        [{"Station": s["station"], "Tests": s["tests"],
          "Link at shift end": s["state_at_end"] or "not reported",
          "Alarms at shift end": "not kept" if s["alarm_state"] is None
          else s["alarm_state"] + (f" ({s['open_alarms']})" if s["open_alarms"] else ""),
          "Calibration": s["calibration_state"]} for s in sec["stations"]],
        hide_index=True, width="stretch", key=f"shift_stations_{sec['line']}",
    )  # fmt: skip
    for a in sec.get("journal_alarms", []):
        who = f", acknowledged by {a['acked_by']}" if a["acked_by"] else ""
        st.warning(f"{a['station']}: {a['message']} ({a['state_at_end']} at the shift's "
                   f"end{who})")
    for a in sec["alarms"]:
        st.info(f"{a['station']}: {a['message']}")

st.download_button(
    "Printable page (HTML)", report.to_html(), file_name=f"shift-{day}-{shift}.html",
    mime="text/html", key="shift_html",
)  # fmt: skip
with st.expander("Text"):
    st.code(report.to_text(), language=None)
