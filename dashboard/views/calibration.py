"""Calibration: master loss, standard loss, ratio and sensitivity over time, with EWMA/CUSUM
charts, alarm markers, failed calibrations and the drift projection of the master loss."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from analytics import HealthConfig, calibration_health
from dashboard import charts, data, tables
from dashboard.common import page, time_range
from dashboard.display import fmt, labelled

_SERIES = {"master_loss_pa": "master loss", "standard_loss_pa": "standard loss",
           "sensitivity": "sensitivity", "ratio": "ratio", "window": "span"}
_KINDS = {"ewma": "EWMA", "cusum": "CUSUM", "ratio": "ratio below minimum",
          "window": "span too narrow", "failed": "failed", "projection": "drift projection"}

p = page("Calibration")
u = p.units
c1, c2, c3 = st.columns(3)
with c1:
    station = st.selectbox("Station", list(p.stations["station"]), key="cal_station")
with c2:
    since, until = time_range(p, "cal_range", "Last 7 days")
series = data.calibration_series(p.url, station, None, since, until)
if series.empty:
    never = data.calibration_series(p.url, station).empty
    st.info(
        f"{station} has no calibrations in this range"
        + (" — it has never calibrated." if never else ".")
    )
    st.stop()
with c3:
    program = st.selectbox("Program", sorted(series["program"].unique()), key="cal_program")
series = series[series["program"] == program].reset_index(drop=True)

with st.expander("Chart settings and limits"):
    a, b, c = st.columns(3)
    min_ratio = a.number_input("Minimum ratio (standard / master loss)", 0.0, 100.0, 2.0,
                               key="cal_min_ratio")  # fmt: skip
    limit_disp = b.number_input(
        f"Master-loss limit for the projection [{u.p_label}] (0 = none)", 0.0, 1e9, 0.0,
        key="cal_loss_limit",
    )  # fmt: skip
    baseline = c.number_input("Baseline calibrations", 2, 100, 10, key="cal_baseline")
limit_pa = limit_disp / u.p_factor if limit_disp > 0 else None
cfg = HealthConfig(min_ratio=min_ratio or None, master_loss_limit_pa=limit_pa,
                   baseline_points=int(baseline))  # fmt: skip
health = calibration_health(series, cfg)
sh = health.series[0]
alarms = pd.DataFrame([a.to_dict() for a in sh.alarms])
if not alarms.empty:
    alarms["at"] = pd.to_datetime(alarms["at"], utc=True)

m1, m2, m3 = st.columns(3)
m1.metric("Calibrations", sh.n)
m2.metric("Failed", sum(not x for x in sh.passed))
m3.metric("Chart alarms", len(sh.alarms))
st.markdown(f"**Drift of the master loss:** {sh.projection.status} — {sh.projection.note}")
if sh.projection.reaches_limit_at is not None:
    st.warning(f"Projected to reach the limit on {p.local(sh.projection.reaches_limit_at)}")

tz = p.settings.timezone
chart_alarms = charts.plant_clock(alarms, tz)
shown = charts.plant_clock(series, tz).assign(
    master=series["master_loss_pa"] * u.p_factor,
    standard=series["standard_loss_pa"] * u.p_factor,
    sens=series["sensitivity"] * u.q_factor / u.p_factor,
    outcome=series["passed"].map({True: "passed", False: "failed"}),
    reason=series["reason"].fillna(""),
)
left, right = st.columns(2)
left.altair_chart(charts.series(shown, "master", f"master loss [{u.p_label}]", chart_alarms),
                  width="stretch")  # fmt: skip
right.altair_chart(charts.series(shown, "standard", f"standard loss [{u.p_label}]", chart_alarms),
                   width="stretch")  # fmt: skip
left.altair_chart(charts.series(shown, "ratio", "ratio standard / master loss [–]",
                                chart_alarms), width="stretch")  # fmt: skip
right.altair_chart(
    charts.series(shown, "sens", f"sensitivity [{u.q_label}/{u.p_label}]", chart_alarms),
    width="stretch",
)

st.subheader("Control charts")
good_times = list(shown.loc[series["passed"].astype(bool), "ended_at"])
if not sh.charts:
    st.info(f"Too few passed calibrations for control charts ({sh.note}).")
for name, pair in sh.charts.items():
    factor = u.p_factor if name == "master_loss_pa" else u.q_factor / u.p_factor
    label = "master loss" if name == "master_loss_pa" else "sensitivity"
    unit = u.p_label if name == "master_loss_pa" else f"{u.q_label}/{u.p_label}"
    a, b = st.columns(2)
    a.caption(f"EWMA of {label} (λ = {pair['ewma'].parameters['lambda']:g}, "
              f"L = {pair['ewma'].parameters['L']:g})")  # fmt: skip
    a.altair_chart(charts.control_chart(pair["ewma"], good_times, f"{label} [{unit}]",
                                        factor), width="stretch")  # fmt: skip
    b.caption(f"CUSUM of {label} (k = {pair['cusum'].parameters['k']:g} σ, "
              f"h = {pair['cusum'].parameters['h']:g} σ): SH above, −SL below")  # fmt: skip
    b.altair_chart(charts.control_chart(pair["cusum"], good_times,
                                        f"{label} CUSUM [{unit}]", factor),
                   width="stretch")  # fmt: skip
st.caption(sh.note)

st.subheader("Alarms")
if alarms.empty:
    st.success("No alarms for this station and program.")
else:
    table = alarms[["at", "kind", "series", "message"]].assign(
        kind=alarms["kind"].map(_KINDS).fillna(alarms["kind"]),
        series=alarms["series"].map(_SERIES).fillna(alarms["series"]))
    tables.show(labelled(table, u, p.settings.timezone).rename(
        columns={"Kind": "Rule", "Series": "Measured"}), key="cal_alarms")

st.subheader("Failed calibrations")
failed = series[~series["passed"].astype(bool)]
if failed.empty:
    st.success("None in this range.")
else:
    table = labelled(failed[["ended_at", "program", "master_loss_pa", "standard_loss_pa",
                             "ratio", "reason"]], u, p.settings.timezone)  # fmt: skip
    tables.show(table, key="cal_failed")
st.caption(f"Newest: {p.local(series['ended_at'].iloc[-1])}, master loss "
           f"{fmt(u.p(series['master_loss_pa'].iloc[-1]))} {u.p_label}")  # fmt: skip
