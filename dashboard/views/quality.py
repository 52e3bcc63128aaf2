"""Quality: part history search, retest-until-pass analysis, leak standards due."""

from __future__ import annotations

from datetime import timedelta

import pandas as pd
import streamlit as st

from analytics import standard_drift, standards_due
from dashboard import data, derived, tables
from dashboard.common import page, pick, time_range
from dashboard.display import fmt, labelled, pct

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
                table[col] = pd.to_datetime(table[col], utc=True)
            tables.show(labelled(table, u, p.settings.timezone), key="q_part_table")
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
    c.metric("Share of passes needing a retest", pct(report.share_of_passes_after_retest))
    d.metric("Passed after ≥ 2 rejects", len(report.passed_after_two_or_more_rejects))
    for alarm in report.alarms:
        st.warning(alarm.message, icon=":material/notifications_active:")
    if report.by_group:
        tables.show(labelled(pd.DataFrame(report.by_group), u), key="q_retest_groups")
    if report.marginal_passes:
        st.markdown("**Marginal passes** (in the guard band right after a reject)")
        marginal = pd.DataFrame(report.marginal_passes)
        if "ended_at" in marginal:
            marginal["ended_at"] = pd.to_datetime(marginal["ended_at"], utc=True)
        tables.show(labelled(marginal, u, p.settings.timezone), key="q_marginal")
    twice = report.passed_after_two_or_more_rejects
    if twice:
        more = f" and {len(twice) - 50:,} more" if len(twice) > 50 else ""
        st.caption("Passed only after two or more rejects: " + ", ".join(twice[:50]) + more)
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
    tables.show(labelled(pd.DataFrame([s.to_dict() for s in due]), u), key="q_standards")
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
        per_day = (None if drift.slope_per_day is None
                   else drift.slope_per_day * u.q_factor / u.p_factor)
        st.caption(f"{std.serial}: measured sensitivity since the certificate — {drift.status}"
                   + (f", {fmt(per_day)} {u.q_label}/{u.p_label} per day" if per_day
                      else ""))  # fmt: skip
