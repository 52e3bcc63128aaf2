"""Fleet live: a tile per station, grouped by line, refreshed every few seconds; station detail."""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import pandas as pd
import streamlit as st

from analytics import HealthConfig, calibration_health, yield_from_counts
from dashboard import charts, data
from dashboard.common import Page, page, refreshed
from dashboard.display import fmt

# badge colours (Streamlit markdown): no emoji, so line PCs without emoji fonts show them too
_STATE_COLOUR = {
    "online": "green", "testing": "green", "idle": "gray", "calibrating": "blue",
    "offline": "gray", "fault": "red",
}  # fmt: skip
_VERDICT_COLOUR = {"pass": "green", "reject": "orange", "gross": "red", "aborted": "gray"}


def _age(now: datetime, at: Any) -> str:
    if at is None or pd.isna(at):
        return "never"
    seconds = max(0.0, (now - pd.Timestamp(at).to_pydatetime()).total_seconds())
    if seconds < 120:
        return f"{seconds:.0f} s ago"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min ago"
    if seconds < 172800:
        return f"{seconds / 3600:.1f} h ago"
    return f"{seconds / 86400:.0f} days ago"


def _alarms(p: Page, station: str, state: str, last_cal: pd.Series | None) -> list[str]:
    """What needs a look now: station down, last calibration failed, calibration charts."""
    out = []
    if state in ("fault", "offline"):
        out.append(f"station {state}")
    if last_cal is not None and pd.notna(last_cal["passed"]) and not bool(last_cal["passed"]):
        out.append("last calibration failed")
    series = data.calibration_series(p.url, station, None, p.now - timedelta(days=7), None)
    if len(series) >= 5:
        health = calibration_health(series, HealthConfig())
        for sh in health.series:  # out of control now: the newest point of a chart signals
            for name, pair in sh.charts.items():
                for kind, chart in pair.items():
                    if chart.points and chart.points[-1].signal:
                        out.append(f"{kind.upper()} {name} ({sh.program})")
    return sorted(set(out))


def tiles(p: Page) -> None:
    """The fleet overview (also what the 5 s fragment redraws)."""
    res = data.latest(p.url, "result").set_index("station")
    status = data.latest(p.url, "status").set_index("station")
    cals = data.latest(p.url, "calibration").set_index("station")
    hour = data.verdict_counts(p.url, p.now - timedelta(hours=1), p.now + timedelta(seconds=1))
    since = p.today_start()
    today = yield_from_counts(
        data.verdict_counts(p.url, since, p.now + timedelta(seconds=1)),
        data.first_pass_counts(p.url, since, p.now + timedelta(seconds=1)),
        by=["station"],
    ).set_index("station")
    cycles = hour.groupby("station")["n"].sum() if not hour.empty else pd.Series(dtype=int)
    st.caption(f"As of {p.local(p.now)} ({p.settings.timezone})")
    for line, group in p.stations.groupby("line", sort=True):
        st.subheader(f"Line {line}")
        cols = st.columns(3)
        for i, station in enumerate(group["station"]):
            state = str(status.loc[station, "state"]) if station in status.index else "unknown"
            last_cal = cals.loc[station] if station in cals.index else None
            with cols[i % 3].container(border=True):
                colour = _STATE_COLOUR.get(state, "gray")
                st.markdown(f"**{station}** :{colour}-badge[{state}]")
                if station in res.index:
                    r = res.loc[station]
                    verdict = str(r["verdict"])
                    st.metric(
                        f"Last result · {r['program']}",
                        f"{fmt(p.units.q(r['leak_rate_sccm']))} {p.units.q_label}",
                    )
                    st.markdown(
                        f":{_VERDICT_COLOUR.get(verdict, 'gray')}-badge[{verdict}] "
                        f"cycle {r['cycle']} · {_age(p.now, r['ended_at'])}"
                    )
                else:
                    st.metric("Last result", "–")
                a, b = st.columns(2)
                a.metric("Cycles, last hour", int(cycles.get(station, 0)))
                fpy = today["first_pass_yield"].get(station) if station in today.index else None
                ty = today["test_yield"].get(station) if station in today.index else None
                shown = fpy if fpy is not None and not pd.isna(fpy) else ty
                b.metric(
                    "Yield today",
                    "–" if shown is None or pd.isna(shown) else f"{shown:.1%}",
                    help="first-pass yield of parts first tested today (test yield when "
                    "parts carry no id)",
                )
                cal_at = None if last_cal is None else last_cal["ended_at"]
                st.caption(f"Last calibration: {_age(p.now, cal_at)}")
                alarms = _alarms(p, station, state, last_cal)
                if alarms:
                    st.warning(" · ".join(alarms), icon=":material/notifications_active:")
                else:
                    st.caption("No active alarms")


def detail(p: Page) -> None:
    st.subheader("Station detail")
    station = st.selectbox("Station", list(p.stations["station"]), key="fleet_station")
    if station is None:
        return
    latest = data.results(p.url, station=station, limit=500, newest_first=True)
    if latest.empty:
        st.info(f"{station} has reported no results yet.")
        return
    shown = p.units.frame(latest)
    u = p.units
    left, right = st.columns(2)
    hist = latest.assign(
        leak=latest["leak_rate_sccm"] * u.q_factor, loss=latest["pressure_loss_pa"] * u.p_factor
    )
    left.altair_chart(charts.history(hist, "leak", f"leak rate [{u.q_label}]"), width="stretch")
    right.altair_chart(
        charts.history(hist, "loss", f"pressure loss [{u.p_label}]"), width="stretch"
    )
    summary = data.leak_summary(
        p.url, p.now - timedelta(days=7), p.now + timedelta(seconds=1), bucket="hour",
        station=station,
    )  # fmt: skip
    if not summary.empty:
        band = summary.assign(**{c: summary[c] * u.q_factor for c in ("mean", "min", "max")})
        st.caption("Leak rate, hourly mean and range over the last 7 days")
        st.altair_chart(charts.band(band, f"leak rate [{u.q_label}]"), width="stretch")
    cols = ["ended_at", "cycle", "program", "part_id", "verdict", "reason"]
    cols += [c for c in shown.columns if "[" in c]
    table = shown[cols].head(50).copy()
    table["ended_at"] = table["ended_at"].dt.tz_convert(p.settings.timezone)
    st.dataframe(table, hide_index=True, width="stretch", key="fleet_latest_table")


p = page("Fleet, live", live=True)


@st.fragment(run_every="5s")
def live() -> None:
    tiles(refreshed(p))


live()
detail(p)
