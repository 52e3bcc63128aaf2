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
guard_pct = st.slider("Guard band below the reject limit, % of the limit", 1, 30, 10,
                      key="read_guard")
bins = st.slider("Bins", 10, 80, 30, key="read_bins")
if not chosen:
    st.info("Pick at least one station.")
    st.stop()

newest = data.results(p.url, program=program, limit=1, newest_first=True)
reject = float(newest["reject_limit_sccm"].iloc[0])
lower_raw = newest["lower_limit_sccm"].iloc[0]
lower = None if pd.isna(lower_raw) else float(lower_raw)
# a lower limit catches implausible readings (a blocked or unsealed part reads too low); it
# is no reject limit, so the guard band and the capability figures look at the reject limit
guard = guard_pct / 100.0 * abs(reject)
u = p.units
st.caption(
    f"{program}: reject limit {fmt(u.q(reject))} {u.q_label}"
    + (f", lower plausibility limit {fmt(u.q(lower))} {u.q_label} (no reject limit: "
       "readings below it point at the test, not the part)" if lower is not None else "")
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
        lo = max(float(s["min"]), (lower if lower is not None else 0.0) - abs(reject))
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
                report = capability(values, reject, None, guard_band=guard,
                                    groups=kept["station"].astype(str).to_numpy())
            else:
                report = capability_from_summary(n, float(s["mean"]), float(s["std"]), reject,
                                                 None)  # fmt: skip
        except ValueError as exc:
            st.warning(f"No capability figures: {exc}")
            continue
        # the figure that applies: the normal Ppu when normality holds, else the percentile
        # method (ISO 22514-2) on the fitted model or the empirical quantiles
        applies = report.non_normal if report.recommended != "normal" else None
        ppu_value = applies.ppu if applies is not None else report.ppu.value
        basis = ("normal model" if applies is None else
                 applies.model if report.recommended == "fitted" else "empirical percentiles")
        ppm = report.ppu.ppm_beyond_limit if applies is None else applies.ppm_above
        m1, m2, m3 = st.columns(3)
        m1.metric("Ppu (applies)", "–" if ppu_value is None else fmt(ppu_value),
                  help=f"long-term capability against the reject limit; basis: {basis}")
        m2.metric("Cpu (short-term)", fmt(report.cpu.value) if report.cpu else "–",
                  help="from moving ranges within each station's sequence; normal model")
        m3.metric("ppm above limit", "–" if ppm is None else f"{ppm:,.0f}",
                  help=f"expected parts per million above the reject limit; basis: {basis}")
        m4, m5, m6 = st.columns(3)
        m4.metric("tests", f"{report.n:,}")
        m5.metric(f"mean [{u.q_label}]", fmt(u.q(report.mean)))
        m6.metric("in guard band", "–" if report.guard_band_share is None
                  else f"{report.guard_band_share:.1%}")  # fmt: skip
        st.caption(f"Applies: Ppu on the {basis} ({report.note})."
                   + ("" if applies is None else
                      f" The normal-model Ppu would be {fmt(report.ppu.value)}, not valid here."))
