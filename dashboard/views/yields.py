"""Yield: first-pass and final yield by station, line, program or shift; trend; reject Pareto."""

from __future__ import annotations

from typing import Any

import pandas as pd
import streamlit as st

from analytics import counts_to_shifts, pareto_from_counts, yield_from_counts
from dashboard import charts, data
from dashboard.common import page, pick, time_range
from dashboard.export import downloads

_GROUPS = {"Station": "station", "Line": "line", "Program": "program", "Shift": "shift"}

p = page("Yield")
c1, c2, c3, c4 = st.columns(4)
with c1:
    since, until = time_range(p, "yield_range", "Last 24 hours")
with c2:
    group_label = st.selectbox("Group by", list(_GROUPS), key="yield_group")
with c3:
    line = pick("Line", sorted(p.stations["line"].unique()), "yield_line")
with c4:
    progs = sorted(data.programs(p.url)["program"].unique())
    program = pick("Program", progs, "yield_program")
group = _GROUPS[group_label]
filters = {"line": line, "program": program}

if group == "shift":
    vc = data.verdict_counts(p.url, since, until, by=(), bucket="hour", **filters)
    fp = data.first_pass_counts(p.url, since, until, by=(), bucket="hour", **filters)
    vc_s, exact_v = counts_to_shifts(vc, p.calendar)
    fp_s, exact_f = counts_to_shifts(fp, p.calendar)
    for df in (vc_s, fp_s):
        df["shift"] = df["shift_date"].astype(str) + " " + df["shift"].astype(str)
    table = yield_from_counts(
        vc_s.drop(columns="shift_date"), fp_s.drop(columns="shift_date"), by=["shift"]
    )
    if not (exact_v and exact_f):
        st.caption("Some hours straddle a shift change: counts near it may sit in the next shift.")
else:
    vc = data.verdict_counts(p.url, since, until, by=(group,), **filters)
    fp = data.first_pass_counts(p.url, since, until, by=(group,), **filters)
    table = yield_from_counts(vc, fp, by=[group])

if table.empty or int(table["tests"].sum()) == 0:
    st.info("No tests in this range and selection.")
    st.stop()

overall = yield_from_counts(
    data.verdict_counts(p.url, since, until, by=(), **filters),
    data.first_pass_counts(p.url, since, until, by=(), **filters),
)
row = overall.iloc[0]
m1, m2, m3, m4 = st.columns(4)


def _pct(value: Any) -> str:
    return "–" if value is None or pd.isna(value) else f"{float(value):.1%}"


m1.metric("Tests", f"{int(row['tests']):,}")
m2.metric("First-pass yield", _pct(row.get("first_pass_yield")))
m3.metric("Final yield", _pct(row.get("final_yield")))
m4.metric("Test yield", _pct(row.get("test_yield")), help="passed tests / tests with a verdict")
if int(row.get("no_part_id", 0) or 0):
    st.caption(
        f"{int(row['no_part_id'])} test(s) carry no part id and count only in the test yield."
    )

st.dataframe(
    table.rename(columns={group: group_label}), hide_index=True, width="stretch",
    key="yield_table",
    column_config={
        c: st.column_config.NumberColumn(c, format="percent")
        for c in ("test_yield", "first_pass_yield", "final_yield")
    },
)  # fmt: skip
downloads(table.rename(columns={group: group_label}), f"leakfleet-yield-by-{group}",
          p.settings.timezone, "yield_table")

st.subheader("Trend")
trend_by = None if group == "shift" else group
trend_vc = data.verdict_counts(
    p.url, since, until, by=(trend_by,) if trend_by else (), bucket="hour", **filters
)
trend_fp = data.first_pass_counts(
    p.url, since, until, by=(trend_by,) if trend_by else (), bucket="hour", **filters
)
span_h = (until - since).total_seconds() / 3600 if since and until else 1e9
if span_h > 48:
    keys = ["day", *([trend_by] if trend_by else [])]
    tv = data.to_local_days(trend_vc, p.settings.timezone, ["n"])
    tf = data.to_local_days(
        trend_fp, p.settings.timezone,
        [c for c in ("parts", "first_pass", "final_pass", "tests", "no_part_id") if c in trend_fp],
    )  # fmt: skip
    x = "day"
else:
    keys = ["bucket", *([trend_by] if trend_by else [])]
    tv = trend_vc.assign(
        bucket=trend_vc["bucket"].dt.tz_convert(p.settings.timezone).dt.strftime("%m-%d %H:00")
    ) if not trend_vc.empty else trend_vc  # fmt: skip
    tf = trend_fp.assign(
        bucket=trend_fp["bucket"].dt.tz_convert(p.settings.timezone).dt.strftime("%m-%d %H:00")
    ) if not trend_fp.empty else trend_fp  # fmt: skip
    x = "bucket"
trend = yield_from_counts(tv, tf, by=keys)
trend["yield"] = trend["first_pass_yield"].fillna(trend["test_yield"])
st.altair_chart(
    charts.yield_trend(trend, x, "yield", trend_by, "first-pass yield"), width="stretch"
)
st.altair_chart(
    charts.verdict_trend(tv.groupby([x, "verdict"], as_index=False)[["n"]].sum(), x),
    width="stretch",
)

st.subheader("Rejects, Pareto")
by_cat = data.verdict_counts(p.url, since, until, by=("station", "program"), **filters)
rejects = by_cat[by_cat["verdict"].isin(["reject", "gross"])].copy()
if rejects.empty:
    st.success("No rejects in this range.")
else:
    left, right = st.columns(2)
    rejects["where"] = rejects["station"] + " · " + rejects["program"]
    with left:
        st.altair_chart(
            charts.pareto(pareto_from_counts(rejects, column="where"), "station · program"),
            width="stretch",
        )
    with right:  # counted in the store (its reason summaries), however long the range
        by_reason = data.verdict_counts(p.url, since, until, by=("reason",), **filters)
        report = pareto_from_counts(by_reason, column="reason", verdicts=("reject", "gross"))
        st.altair_chart(charts.pareto(report, "reason"), width="stretch")
