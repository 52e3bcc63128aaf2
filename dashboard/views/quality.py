"""Quality: part history search, retest-until-pass analysis, leak standards due."""

from __future__ import annotations

from datetime import timedelta

import pandas as pd
import streamlit as st

from analytics import standard_drift, standards_due
from dashboard import data, derived
from dashboard.common import page, pick, time_range
from dashboard.display import fmt

_RETEST_ROWS = 200_000  # retest analysis follows parts across tests: bounded row count

p = page("Quality")
u = p.units


@st.fragment
def part_search() -> None:
    """Searching reruns only this section, not the retest analysis below."""
    st.subheader("Part history")
    part = st.text_input("Part id", key="q_part", placeholder="e.g. HX210-100042").strip()
    if part:
        # the same report as 'leakfleet report part': every test, the calibration in force
        history = data.part_report(p.url, part, p.now + timedelta(seconds=1))
        if not history["tests"]:
            st.info(f"No tests of part {part!r} in the store.")
        else:
            a, b, c = st.columns(3)
            a.metric("Tests", len(history["tests"]))
            b.metric("Final verdict", history["final_verdict"] or "–")
            rejects = history["rejects_before_pass"]
            c.metric("Rejects before the first pass", "–" if rejects is None else rejects)
            table = pd.DataFrame(history["tests"])
            for col in ("ended_at", "calibration_at"):
                table[col] = pd.to_datetime(table[col], utc=True).dt.tz_convert(p.settings.timezone)
            st.dataframe(u.frame(table), hide_index=True, width="stretch",
                         key="q_part_table")  # fmt: skip
            st.caption(f"{history['note']}; calibration in force = the station's latest "
                       "calibration of the same program before the test")


part_search()

st.subheader("Retest until pass")
c1, c2 = st.columns(2)
with c1:
    since, until = time_range(p, "q_range", "Last 24 hours")
with c2:
    station = pick("Station", list(p.stations["station"]), "q_station")
counts = data.verdict_counts(p.url, since, until, by=(), station=station)
total = int(counts["n"].sum()) if not counts.empty else 0
if total == 0:
    st.info("No tests in this range.")
elif total > _RETEST_ROWS:
    st.info(f"{total:,} tests in this range: narrow it to at most {_RETEST_ROWS:,} to follow "
            "parts across their retests.")  # fmt: skip
else:
    report = derived.retest_report(
        p.url, since, until, station, p.plant_settings.timezone, p.plant_settings.shifts
    )
    a, b, c, d = st.columns(4)
    a.metric("Parts", f"{report.parts:,}")
    b.metric("Passed after a retest", report.passed_after_retest)
    c.metric("Share of passes needing a retest",
             "–" if report.share_of_passes_after_retest is None
             else f"{report.share_of_passes_after_retest:.2%}")  # fmt: skip
    d.metric("Passed after ≥ 2 rejects", len(report.passed_after_two_or_more_rejects))
    for alarm in report.alarms:
        st.warning(alarm.message, icon=":material/notifications_active:")
    if report.by_group:
        st.dataframe(
            pd.DataFrame(report.by_group),
            hide_index=True,
            width="stretch",
            key="q_retest_groups",
            column_config={"share": st.column_config.NumberColumn(format="percent")},
        )
    if report.marginal_passes:
        st.markdown("**Marginal passes** (in the guard band right after a reject)")
        marginal = pd.DataFrame(report.marginal_passes)
        st.dataframe(u.frame(marginal), hide_index=True, key="q_marginal")
    if report.passed_after_two_or_more_rejects:
        st.caption(
            "Passed only after two or more rejects: "
            + ", ".join(report.passed_after_two_or_more_rejects[:50])
        )
    st.caption(report.note)

st.subheader("Leak standards")
if not p.settings.standards:
    st.info("No leak standards are registered in the config (a `[[standards]]` table per "
            "standard: serial, station, nominal, reference_pressure, certificate_date, due_date "
            "or interval_months, uncertainty_pct).")  # fmt: skip
else:
    within = st.slider("Due within (days)", 7, 180, 30, key="q_due_days")
    today = p.now.astimezone(p.tz).date()
    due = standards_due(p.settings.standards, today, within)
    st.dataframe(pd.DataFrame([s.to_dict() for s in due]), hide_index=True,
                 width="stretch", key="q_standards")  # fmt: skip
    for s in due:
        if s.status == "overdue":
            st.error(f"{s.serial} on {s.station} is overdue since {s.due_date}")
        elif s.status == "due soon":
            st.warning(f"{s.serial} on {s.station} is due on {s.due_date} ({s.days_left} days)")
    for std in p.settings.standards:
        cals = data.calibrations(p.url, station=std.station)
        if cals.empty:
            continue
        drift = standard_drift(cals, std)
        st.caption(f"{std.serial}: measured sensitivity since the certificate — {drift.status}"
                   + (f", {fmt(drift.slope_per_day)} sccm/Pa per day" if drift.slope_per_day
                      else ""))  # fmt: skip
