"""Readings vs limits: histograms with the reject limit, lower limit and guard band; capability."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from analytics import capability, capability_from_summary, fixed_edges, histogram_from_counts
from dashboard import charts, data
from dashboard.common import page, time_range
from dashboard.display import fmt

_FULL_STUDY_ROWS = 20_000  # up to this many readings the full study (normality, fits) runs

p = page("Readings vs limits")
pairs = data.programs(p.url)
if pairs.empty:
    st.info("No results yet.")
    st.stop()
c1, c2, c3 = st.columns([1, 1, 2])
with c1:
    program = st.selectbox("Program", sorted(pairs["program"].unique()), key="read_program")
with c2:
    since, until = time_range(p, "read_range", "Last 24 hours")
on_program = sorted(pairs.loc[pairs["program"] == program, "station"])
with c3:
    chosen = st.multiselect(
        "Stations (side by side)",
        on_program,
        default=on_program[:3],
        key=f"read_stations_{program}",
    )
guard_pct = st.slider("Guard band, % of tolerance", 1, 30, 10, key="read_guard")
bins = st.slider("Bins", 10, 80, 30, key="read_bins")
if not chosen:
    st.info("Pick at least one station.")
    st.stop()

newest = data.results(p.url, program=program, limit=1, newest_first=True)
reject = float(newest["reject_limit_sccm"].iloc[0])
lower_raw = newest["lower_limit_sccm"].iloc[0]
lower = None if pd.isna(lower_raw) else float(lower_raw)
tolerance = reject - lower if lower is not None else abs(reject)
guard = guard_pct / 100.0 * tolerance
u = p.units
st.caption(
    f"{program}: reject limit {fmt(u.q(reject))} {u.q_label}"
    + (f", lower limit {fmt(u.q(lower))} {u.q_label}" if lower is not None else "")
    + f", guard band {fmt(u.q(guard))} {u.q_label} (limits from the newest result)"
)
summary = data.leak_summary(p.url, since, until, by=("station",), program=program)
summary = summary.set_index("station") if not summary.empty else summary
cols = st.columns(min(3, len(chosen)))
for i, station in enumerate(chosen):
    with cols[i % len(cols)].container(border=True):
        st.markdown(f"**{station}** · {program}")
        if summary.empty or station not in summary.index or int(summary.loc[station, "n"]) < 2:
            st.info("Fewer than two readings in this range.")
            continue
        s = summary.loc[station]
        n = int(s["n"])
        # winsorised range: gross leaks would squash the picture; they show as "above range"
        hi = min(float(s["max"]), reject * 3)
        lo = max(float(s["min"]), (lower if lower is not None else 0.0) - tolerance)
        edges = fixed_edges(lo, hi, bins, reject_limit=reject, lower_limit=lower)
        counts = data.histogram(p.url, since, until, tuple(edges), station=station,
                                program=program)  # fmt: skip
        hist = histogram_from_counts(
            list(counts[["bin_lo", "bin_hi", "n"]].itertuples(index=False, name=None)),
            reject_limit=reject, lower_limit=lower,
        )  # fmt: skip
        st.altair_chart(charts.histogram(hist, u.q_factor, u.q_label, guard),
                        width="stretch")  # fmt: skip
        if hist.under or hist.over:
            st.caption(f"outside the chart: {hist.under} below, {hist.over} above")
        try:
            if n <= _FULL_STUDY_ROWS:
                rows = data.results(p.url, since, until, station=station, program=program)
                kept = rows.loc[rows["verdict"] != "aborted"]
                values = kept["leak_rate_sccm"].to_numpy(float)
                report = capability(values, reject, lower, guard_band=guard,
                                    groups=kept["station"].astype(str).to_numpy())
            else:
                report = capability_from_summary(n, float(s["mean"]), float(s["std"]), reject,
                                                 lower)  # fmt: skip
        except ValueError as exc:
            st.warning(f"No capability figures: {exc}")
            continue
        m1, m2, m3 = st.columns(3)
        m1.metric("Ppu", fmt(report.ppu.value))
        m2.metric("Cpu", fmt(report.cpu.value) if report.cpu else "–")
        ppm = report.ppu.ppm_beyond_limit
        if report.recommended != "normal" and report.non_normal is not None:
            ppm = report.non_normal.ppm_above
        m3.metric("ppm above limit", "–" if ppm is None else f"{ppm:,.0f}",
                  help=f"expected parts per million above the reject limit; model: "
                  f"{report.recommended}")  # fmt: skip
        m4, m5, m6 = st.columns(3)
        m4.metric("n", f"{report.n:,}")
        m5.metric("mean", fmt(u.q(report.mean)))
        m6.metric("in guard band", "–" if report.guard_band_share is None
                  else f"{report.guard_band_share:.2%}")  # fmt: skip
        if report.non_normal is not None and report.non_normal.ppu is not None:
            st.caption(f"{report.non_normal.model}: Ppu {fmt(report.non_normal.ppu)}")
        st.caption(f"Normality: {report.note}")
