"""Pressure traces: a station's recent curves overlaid, phases shaded, the reject threshold as a
loss over the test window, the calibration study's curves, and the back-down map.

The map (%GRR against cycle time) comes from ``analytics.backdown``; this page only draws it.
"""

from __future__ import annotations

import itertools
from typing import Any

import altair as alt
import numpy as np
import pandas as pd
import streamlit as st

from analytics.backdown import backdown_map, curve_of
from dashboard import data
from dashboard.common import TEST_PARAMETER_NOTE, page

p = page("Pressure traces")
u = p.units
stations = data.trace_stations(p.url)
if not stations:
    st.info(
        "No pressure traces in this journal yet. Stations whose profiles send curves store "
        "them here; 'leakfleet sim study --station L1-S1' records a simulated long-cycle "
        "calibration study to try the page."
    )
    st.stop()
# a link may open one station's curves, or one test's (?station=L1-S1&cycle=1042)
asked = st.query_params.get("station")
if asked in stations and "traces_station" not in st.session_state:
    st.session_state["traces_station"] = asked
station = st.selectbox("Station", stations, key="traces_station")
recent = data.traces(p.url, station, None, 200)
programs = sorted({t.program for t in recent})
program = (
    st.selectbox("Program", programs, key="traces_program") if len(programs) > 1 else programs[0]
)
recent = [t for t in recent if t.program == program]
verdicts = data.verdicts_of(p.url, station, [t for t in recent if t.role == "result"])
c1, c2 = st.columns([2, 1])
show = c1.radio("Curves", ["Newest tests", "Rejects only", "One test"], horizontal=True,
                key="traces_show",
                index=2 if st.query_params.get("cycle") is not None else 0)
n = c2.slider("Curves shown", 1, 50, 10, key="traces_n")
results_shown = [t for t in recent if t.role == "result"]
if show == "Rejects only":
    results_shown = [t for t in results_shown if verdicts.get(t.record_id) == "reject"]
elif show == "One test":
    labels = {f"cycle {t.cycle} · {verdicts.get(t.record_id, '?')} · "
              f"{t.ended_at.astimezone(p.tz):%Y-%m-%d %H:%M:%S}": t for t in results_shown}
    wanted = st.query_params.get("cycle")
    keys = list(labels)
    at = next((i for i, k in enumerate(keys) if k.startswith(f"cycle {wanted} ")), 0)
    if keys:
        results_shown = [labels[st.selectbox("Test", keys, index=at, key="traces_one")]]
# the newest calibration's two curves, drawn beside the tests for comparison
reference = [next((t for t in recent if t.role == role), None) for role in ("master", "standard")]

_PHASE_COLOURS = {"fill": "#d9e6f2", "stabilise": "#f2ecd9", "test": "#dff2d9", "dump": "#eeeeee"}


def _label(t: Any) -> str:
    if t.role == "result":
        return f"#{t.cycle} {verdicts.get(t.record_id, '')}".strip()
    return f"calibration {t.role} {t.ended_at.astimezone(p.tz):%m-%d %H:%M}"


def _frame(chosen: list[Any]) -> pd.DataFrame:
    rows = []
    for t in chosen:
        times = np.arange(len(t.pressures_pa)) * t.sample_interval_s
        rows.append(pd.DataFrame({
            "t_s": times, "pressure": np.asarray(t.pressures_pa) * u.p_factor,
            "curve": _label(t), "role": t.role,
        }))  # fmt: skip
    return pd.concat(rows, ignore_index=True)


def _phases(t: object) -> pd.DataFrame:
    phases = list(t.phases)  # type: ignore[attr-defined]
    rows = [
        {"phase": a[0], "start": a[1], "end": b[1]}
        for a, b in itertools.pairwise(phases)
        if a[0] in _PHASE_COLOURS
    ]
    return pd.DataFrame(rows, columns=["phase", "start", "end"])


shown = results_shown[:n] + [t for t in reference if t is not None]
if not shown:
    st.info(f"No {'rejected ' if show == 'Rejects only' else ''}test curves of {station} "
            f"{program} among its newest 200.")
    st.stop()
df = _frame(shown)
phases = _phases(shown[0])
band = alt.Chart(phases).mark_rect(opacity=0.5).encode(
    x=alt.X("start:Q", title="time from the start of fill [s]"), x2="end:Q",
    color=alt.Color("phase:N", scale=alt.Scale(domain=list(_PHASE_COLOURS),
                                               range=list(_PHASE_COLOURS.values())),
                    title="phase"),
)  # fmt: skip
lines = alt.Chart(df).mark_line(strokeWidth=1).encode(
    x="t_s:Q", y=alt.Y("pressure:Q", title=f"pressure [{u.p_label}]", scale=alt.Scale(zero=False)),
    detail="curve:N", strokeDash=alt.StrokeDash("role:N", title="test"),
    tooltip=["curve", alt.Tooltip("t_s:Q", format=".2f", title="time [s]"),
             alt.Tooltip("pressure:Q", format=".6g", title="pressure")],
)  # fmt: skip
st.altair_chart((band + lines).properties(height=360), width="stretch")
st.caption(
    f"{min(n, len(results_shown))} test curve(s) of {station} {program}"
    + (", with the newest calibration's master and master-plus-standard curves (dashed)"
       if any(reference) else "")
    + "; phases as the station reported them for the first curve shown."
)

# -- the test window, zoomed, with the reject threshold as a loss ----------------------------
test_at = dict(shown[0].phases).get("test")
dump_at = dict(shown[0].phases).get("dump")
cal = data.calibrations(p.url, station=station, program=program, limit=1, newest_first=True)
res = data.results(p.url, station=station, program=program, limit=1, newest_first=True)
if test_at is not None and dump_at is not None:
    window = df[(df["t_s"] >= test_at) & (df["t_s"] <= dump_at)]
    chart = alt.Chart(window).mark_line(strokeWidth=1).encode(
        x=alt.X("t_s:Q", title="time [s]"),
        y=alt.Y("pressure:Q", title=f"pressure [{u.p_label}]", scale=alt.Scale(zero=False)),
        detail="curve:N", strokeDash="role:N",
    )  # fmt: skip
    sens = None if cal.empty else cal["sensitivity"].iloc[0]
    limit = None if res.empty else res["reject_limit_sccm"].iloc[0]
    if sens is not None and limit is not None and pd.notna(sens) and pd.notna(limit) and sens > 0:
        start = float(window[window["t_s"] == window["t_s"].min()]["pressure"].median())
        loss = float(limit) / float(sens) * u.p_factor  # the loss a reject-limit leak makes
        threshold = pd.DataFrame({"t_s": [test_at, dump_at], "pressure": [start, start - loss]})
        chart = chart + alt.Chart(threshold).mark_line(color="#b23a48", strokeDash=[6, 3]).encode(
            x="t_s:Q", y="pressure:Q")  # fmt: skip
        st.caption(
            f"Red dashes: the loss a leak at the reject limit ({limit:g} sccm) makes over "
            f"the test, by the newest calibration's sensitivity ({sens:.4g} sccm/Pa)."
        )
    st.altair_chart(chart.properties(height=260), width="stretch")

# -- back-down map --------------------------------------------------------------------------
st.subheader("Back-down map")
masters = [t for t in recent if t.role == "master"]
standards = [t for t in recent if t.role == "standard"]
if len(masters) < 3 or len(standards) < 2:
    st.info(
        "The map needs at least 3 master-part and 2 leak-standard curves of a long cycle "
        "(a calibration study)."
    )
    st.stop()
tol_default = (
    float(res["reject_limit_sccm"].iloc[0])
    if not res.empty and pd.notna(res["reject_limit_sccm"].iloc[0])
    else 1.0
)
flow_default = (
    float(cal["standard_sccm"].iloc[0])
    if not cal.empty and pd.notna(cal["standard_sccm"].iloc[0])
    else 1.0
)
a, b, c = st.columns(3)
tolerance = a.number_input("Tolerance [sccm]", 0.001, 1e6, tol_default, key="bd_tol")
flow = b.number_input("Leak standard [sccm]", 0.001, 1e6, flow_default, key="bd_flow")
target = c.number_input("Target %GRR", 1.0, 50.0, 10.0, key="bd_target")
result = backdown_map(
    [curve_of(t) for t in masters],
    [curve_of(t) for t in standards],
    standard_sccm=flow,
    tolerance_sccm=tolerance,
    target_pct=target,
    step_s=1.0,
)
pts = pd.DataFrame([x.to_dict() for x in result.points if x.verdict != "invalid"])
if not pts.empty:
    best = pts.sort_values("pct_grr_high").groupby("cycle_s", as_index=False).first()
    base = alt.Chart(best).mark_circle(size=30).encode(
        x=alt.X("cycle_s:Q", title="stabilise + test [s]"),
        y=alt.Y("pct_grr_high:Q", title="%GRR (upper bound), best split per cycle"),
        color=alt.Color("verdict:N", title=None),
        tooltip=[alt.Tooltip("stabilise_s:Q", title="stabilise [s]"),
                 alt.Tooltip("test_s:Q", title="test [s]"),
                 alt.Tooltip("pct_grr:Q", format=".1f", title="%GRR"),
                 alt.Tooltip("pct_grr_high:Q", format=".1f", title="%GRR, upper bound")],
    )  # fmt: skip
    rule = (
        alt.Chart(pd.DataFrame({"y": [target]}))
        .mark_rule(color="#4c9a5f", strokeDash=[5, 3])
        .encode(y="y:Q")
    )
    st.altair_chart((base + rule).properties(height=280), width="stretch")
if result.chosen is not None:
    ch = result.chosen
    st.success(
        f"Shortest cycle meeting {target:g} %GRR at the upper bound: stabilise "
        f"{ch.stabilise_s:g} s + test {ch.test_s:g} s (%GRR {ch.pct_grr:.1f}, upper "
        f"{ch.pct_grr_high:.1f})."
    )
for note in [*result.checks, *result.notes]:
    st.caption(note)
st.caption(f"Assumptions: {result.assumptions}")
st.warning(TEST_PARAMETER_NOTE)
