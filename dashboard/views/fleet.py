"""Fleet live: a tile per station, grouped by line, refreshed every few seconds; station detail."""

from __future__ import annotations

import time
from datetime import datetime, timedelta
from typing import Any

import pandas as pd
import streamlit as st

from analytics import yield_from_counts
from analytics.fleet import LEVELS, Standing, group_by_line, rank, standing
from dashboard import charts, data
from dashboard.common import Page, page, refreshed
from dashboard.display import fmt
from dashboard.export import downloads

# badge colours (Streamlit markdown): no emoji, so line PCs without emoji fonts show them too;
# every colour comes with the level's word and shape (analytics.fleet.LEVELS), never alone
_LEVEL_COLOUR = {
    "alarm": "red", "offline": "violet", "warning": "orange", "ok": "green", "no data": "gray",
}  # fmt: skip
_VERDICT_COLOUR = {"pass": "green", "reject": "orange", "gross": "red", "aborted": "gray"}


def _age(now: datetime, at: Any) -> str:
    if at is None or pd.isna(at):
        return "never"
    seconds = (now - pd.Timestamp(at).to_pydatetime()).total_seconds()
    if seconds < -60:
        return "stamped in the future (a station clock ahead, or a plant replayed fast)"
    seconds = max(0.0, seconds)
    if seconds < 120:
        return f"{seconds:.0f} s ago"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min ago"
    if seconds < 172800:
        return f"{seconds / 3600:.1f} h ago"
    return f"{seconds / 86400:.0f} days ago"


def _row(frame: pd.DataFrame, station: str) -> pd.Series | None:
    return frame.loc[station] if station in frame.index else None  # type: ignore[return-value]


def standings(p: Page) -> list[Standing]:
    """Every station's standing from the alarm rules (analytics.fleet), worst first."""
    status = data.latest(p.url, "status").set_index("station")
    res = data.latest(p.url, "result").set_index("station")
    plant = p.plant_settings  # a standard's due day is the plant's
    conditions = data.fleet_conditions(p.url, p.now, plant.alarms, plant.standards,
                                       plant.timezone)
    out = []
    for station, line in zip(p.stations["station"], p.stations["line"], strict=True):
        recent = data.results(p.url, station=station, limit=60, newest_first=True)
        verdicts = [str(v) for v in recent["verdict"][::-1]] if not recent.empty else []
        last = _row(res, station)
        out.append(standing(
            station, str(line), conditions.get(station, []), verdicts=verdicts,
            last_leak_sccm=None if last is None else last["leak_rate_sccm"],
            last_limit_sccm=None if last is None else last.get("reject_limit_sccm"),
            state=str(status.loc[station, "state"]) if station in status.index else None,
        ))  # fmt: skip
    return rank(out)


def _tile(
    p: Page, s: Standing, last: pd.Series | None, cycles: int, shown: float | None, cal_at: Any,
    link: bool = True,
) -> None:
    """One station: level in words and shape, what is wrong, the last reading against its
    limit. Text that wraps rather than metrics that truncate, so a 1024-px line PC shows it."""
    colour = _LEVEL_COLOUR[s.level]
    st.markdown(f"**{s.station}** :{colour}-badge[{s.symbol} {s.label}]")
    if s.headline:
        st.markdown(f"**{s.headline}**")
    if last is not None:
        verdict = str(last["verdict"])
        if s.last_leak_sccm is None:
            value = "no reading"
        else:
            value = f"{fmt(p.units.q(s.last_leak_sccm))} {p.units.q_label}"
        share = s.limit_share
        limit = (
            f" · limit {fmt(p.units.q(s.last_limit_sccm))} {p.units.q_label}"
            + (f" ({share:.0%} of it)" if share is not None and share >= 0 else "")
            if s.last_limit_sccm is not None
            else ""
        )
        st.markdown(
            f"Last result · {last['program']}<br>"
            f"<span style='font-size:1.5rem;font-weight:600'>{value}</span>",
            unsafe_allow_html=True,
        )
        st.markdown(
            f":{_VERDICT_COLOUR.get(verdict, 'gray')}-badge[{verdict}] "
            f"cycle {last['cycle']} · {_age(p.now, last['ended_at'])}{limit}"
        )
    else:
        st.markdown("Last result · none yet")
    yield_text = "–" if shown is None or pd.isna(shown) else f"{shown:.1%}"
    st.markdown(
        f"**{cycles}** cycles in the last hour · yield today **{yield_text}**",
        help="yield: first-pass yield of parts first tested today (test yield when parts "
        "carry no id)",
    )
    streak = f" · {s.reject_streak} rejects in a row" if s.reject_streak else ""
    st.caption(f"Last calibration: {_age(p.now, cal_at)}{streak}")
    if link:  # a wall screen has nothing to click
        st.page_link("views/station.py", label=f"Station page of {s.station}",
                     icon=":material/open_in_new:", query_params={"station": s.station})
    if len(s.conditions) > 1:
        with st.expander(f"{len(s.conditions)} open conditions"):
            for c in s.conditions:
                st.markdown(f"- {'ALARM' if c.severity == 'alarm' else 'warning'}: {c.message}")
    elif not s.conditions:
        st.caption("No active alarms")


def tiles(p: Page, kiosk_every: float | None = None) -> None:
    """The fleet overview, worst station first (also what the 5 s fragment redraws). A kiosk
    shows one line at a time, the next every ``kiosk_every`` seconds."""
    res = data.latest(p.url, "result").set_index("station")
    cals = data.latest(p.url, "calibration").set_index("station")
    hour = data.verdict_counts(p.url, p.now - timedelta(hours=1), p.now + timedelta(seconds=1))
    since = p.today_start()
    today = yield_from_counts(
        data.verdict_counts(p.url, since, p.now + timedelta(seconds=1)),
        data.first_pass_counts(p.url, since, p.now + timedelta(seconds=1)),
        by=["station"],
    ).set_index("station")
    cycles = hour.groupby("station")["n"].sum() if not hour.empty else pd.Series(dtype=int)
    board = standings(p)
    counts = {lvl: sum(s.level == lvl for s in board) for lvl in LEVELS}
    summary = " · ".join(
        f"{LEVELS[k][2]} {n} {LEVELS[k][1].lower()}" for k, n in counts.items() if n
    )
    st.caption(f"As of {p.local(p.now)} ({p.settings.timezone}) · {summary} · worst first")
    by_line = dict(group_by_line(board))
    if kiosk_every and by_line:
        names = list(by_line)
        shown_line = names[int(time.time() // kiosk_every) % len(names)]
        others = [n for n in names if n != shown_line]
        st.caption(f"Line {names.index(shown_line) + 1} of {len(names)}"
                   + (f"; next every {kiosk_every:g} s: {', '.join(others)}" if others else ""))
        by_line = {shown_line: by_line[shown_line]}
    for line, group in by_line.items():
        st.subheader(f"Line {line}")
        cols = st.columns(3)
        for i, s in enumerate(group):
            fpy = today["first_pass_yield"].get(s.station) if s.station in today.index else None
            ty = today["test_yield"].get(s.station) if s.station in today.index else None
            shown = fpy if fpy is not None and not pd.isna(fpy) else ty
            with cols[i % 3].container(border=True):
                _tile(
                    p, s, _row(res, s.station),
                    int(cycles.get(s.station, 0)), shown,
                    cals.loc[s.station, "ended_at"] if s.station in cals.index else None,
                    link=not kiosk_every,
                )  # fmt: skip


def detail(p: Page) -> None:
    st.subheader("Station detail")
    station = st.selectbox("Station", list(p.stations["station"]), key="fleet_station")
    if station is None:
        return
    st.page_link("views/station.py", label=f"Everything about {station}: limits over days, "
                 "calibrations, alarms, link, config", query_params={"station": station})
    latest = data.results(p.url, station=station, limit=500, newest_first=True)
    if latest.empty:
        st.info(f"{station} has reported no results yet.")
        return
    shown = p.units.frame(latest)
    u = p.units
    left, right = st.columns(2)
    hist = charts.plant_clock(
        latest.assign(
            leak=latest["leak_rate_sccm"] * u.q_factor,
            loss=latest["pressure_loss_pa"] * u.p_factor,
        ),
        p.settings.timezone,
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
        band = charts.plant_clock(
            summary.assign(**{c: summary[c] * u.q_factor for c in ("mean", "min", "max")}),
            p.settings.timezone,
        )
        st.caption("Leak rate, hourly mean and range over the last 7 days")
        st.altair_chart(charts.band(band, f"leak rate [{u.q_label}]"), width="stretch")
    cols = ["ended_at", "cycle", "program", "part_id", "verdict", "reason"]
    cols += [c for c in shown.columns if "[" in c]
    table = shown[cols].head(50).copy()
    table["ended_at"] = table["ended_at"].dt.tz_convert(p.settings.timezone)
    config: dict[str, Any] = {}
    if station in data.trace_stations(p.url):
        # each test's pressure curve, opened on the traces page
        table["curve"] = [f"traces?station={station}&cycle={c}" for c in table["cycle"]]
        config["curve"] = st.column_config.LinkColumn("Curve", display_text="open curve")
        st.page_link("views/traces.py", label=f"Pressure curves of {station}: newest, rejects",
                     query_params={"station": station})
    st.dataframe(table, hide_index=True, width="stretch", key="fleet_latest_table",
                 column_config=config or None)
    downloads(table.drop(columns=["curve"], errors="ignore"), f"leakfleet-{station}-latest",
              p.settings.timezone, "fleet_latest")
    maintenance(p, station)


def alarm_list(p: Page) -> None:
    """The journal's alarm list (what the gateway's evaluation keeps), with acknowledgement."""
    st.subheader("Alarms")
    if not p.url.startswith("sqlite:"):
        st.caption("Alarm states are kept in the gateway's journal; this store is not one.")
        return
    alarms = data.open_alarms(p.url)
    if alarms.empty:
        st.caption("No open alarms in the journal (the gateway evaluates the rules every 30 s).")
        return
    table = alarms.assign(
        since=pd.to_datetime(alarms["since"], utc=True).dt.tz_convert(p.settings.timezone)
        .dt.strftime("%Y-%m-%d %H:%M"),
        severity=alarms["severity"].str.upper(),
    ).rename(columns={"id": "No.", "station": "Station", "severity": "Severity",
                      "state": "State", "since": "Since", "message": "What",
                      "acked_by": "Acknowledged by"})  # fmt: skip
    st.dataframe(table, hide_index=True, width="stretch", key="fleet_alarm_table")
    unacked = alarms[alarms["state"] == "active"]
    if unacked.empty:
        return
    with st.form("fleet_ack", clear_on_submit=True):
        a, b, c = st.columns([2, 2, 1])
        choice = a.selectbox(
            "Acknowledge alarm", list(unacked["id"]), key="fleet_ack_id",
            format_func=lambda i: f"#{i} "
            + str(unacked.loc[unacked["id"] == i, "message"].iloc[0])[:60],
        )  # fmt: skip
        who = b.text_input("Your name", key="fleet_ack_by")
        if c.form_submit_button("Acknowledge") and choice is not None:
            if not who.strip():
                st.error("Say who acknowledges the alarm.")
            elif data.acknowledge(p.url, int(choice), who.strip()):
                st.success(f"Alarm #{choice} acknowledged by {who.strip()}.")
            else:
                st.info(f"Alarm #{choice} is no longer open.")


def maintenance(p: Page, station: str) -> None:
    """A station's maintenance log and a form to add to it (restarts calibration baselines)."""
    from gateway.records import MAINTENANCE_KINDS, MaintenanceEvent

    st.markdown("**Maintenance and notes**")
    events = data.maintenance(p.url, station)
    if not events.empty:
        shown = events.assign(
            at=events["at"].dt.tz_convert(p.settings.timezone).dt.strftime("%Y-%m-%d %H:%M")
        ).rename(columns={"at": "When", "kind": "What", "note": "Note", "by": "By"})
        st.dataframe(shown[["When", "What", "Note", "By"]], hide_index=True, width="stretch",
                     key="fleet_maintenance_table")  # fmt: skip
    if not p.url.startswith("sqlite:"):
        return
    with st.form("fleet_maintenance", clear_on_submit=True):
        a, b, c = st.columns(3)
        kind = a.selectbox("What was done", MAINTENANCE_KINDS, key="fleet_mt_kind")
        note = b.text_input("Note", key="fleet_mt_note")
        who = c.text_input("By", key="fleet_mt_by")
        st.caption(
            "A seal change, new fixture, new leak standard, repair or baseline reset restarts "
            "the station's calibration baselines; a note only annotates. Lock out and vent "
            "the station before working on it."
        )
        if st.form_submit_button("Record"):
            try:
                event = MaintenanceEvent(station, p.now, str(kind), note.strip(), who.strip())
            except ValueError as exc:
                st.error(str(exc))
            else:
                data.add_maintenance(p.url, event)
                st.success(f"Recorded: {kind} on {station}.")


p = page("Fleet, live", live=True)
# a wall screen: ?kiosk=1 (optionally &every=30) hides the sidebar and shows one line at a
# time, cycling through the lines; nothing to click
_kiosk = st.query_params.get("kiosk") in ("1", "true", "yes")
try:
    _every = min(max(float(st.query_params.get("every", "20")), 5.0), 600.0)
except ValueError:
    _every = 20.0
if _kiosk:
    st.markdown(
        "<style>[data-testid='stSidebar'], [data-testid='stSidebarCollapsedControl'], "
        "[data-testid='stHeader'] {display: none;} .block-container {max-width: 100%; "
        "padding-top: 1rem;} </style>",
        unsafe_allow_html=True,
    )


@st.fragment(run_every="5s")
def live() -> None:
    tiles(refreshed(p), _every if _kiosk else None)


live()
if not _kiosk:
    st.caption("Wall screen: open this page with `?kiosk=1` (and `&every=30` for the "
               "seconds per line) for no sidebar and one line at a time.")
    alarm_list(p)
    detail(p)
