"""One station: leak rate against its limits over days, calibrations, alarms, link, quarantine,
maintenance, and its config and profile. Opened from a fleet tile (``?station=ID``); ``&print=1``
is its print view."""

from __future__ import annotations

from datetime import datetime
from typing import Any

import pandas as pd
import streamlit as st

from analytics import yield_from_counts
from analytics.station import limits_of
from dashboard import charts, data, station_data
from dashboard.common import Page, page, time_range
from dashboard.display import fmt
from dashboard.printing import hide_for_print, print_link, printing, show_table

#: the ranges a link may carry in ``range=`` (the time-range picker's presets)
_RANGES = ("Last hour", "Last 8 hours", "Last 24 hours", "Last 7 days", "Last 30 days", "Today",
           "Current shift", "Everything")
_POINTS = 2000  # newest tests drawn as dots; the band covers the whole range
_STATE_WORDS = {"online": "online", "offline": "OFFLINE", "fault": "FAULT", "idle": "idle",
                "testing": "testing", "calibrating": "calibrating"}


def _when(p: Page, column: pd.Series) -> pd.Series:
    """Times as text in the zone the viewer picked; "–" where there is none."""
    ts = pd.to_datetime(column, utc=True)
    return ts.dt.tz_convert(p.settings.timezone).dt.strftime("%Y-%m-%d %H:%M:%S").fillna("–")


def _text(frame: pd.DataFrame) -> pd.DataFrame:
    """No "None"/"nan" on screen: absent values as "–"."""
    return frame.astype(object).where(frame.notna(), "–")


def _short(texts: pd.Series, width: int = 90) -> pd.Series:
    """On paper, the start of a long text (the interactive page shows it whole)."""
    out = texts.astype(object).where(texts.notna(), "–").astype(str)
    if not printing():
        return out
    return out.where(out.str.len() <= width, out.str.slice(0, width - 1) + "…")


def _summary(p: Page, station: str, since: datetime | None, until: datetime | None) -> None:
    row = p.stations[p.stations["station"] == station].iloc[0]
    status = data.latest(p.url, "status")
    mine = status[status["station"] == station]
    state = _STATE_WORDS.get(str(mine["state"].iloc[0]), str(mine["state"].iloc[0])) \
        if not mine.empty else "no status yet"
    counts = data.verdict_counts(p.url, since, until, by=("station",), station=station)
    fp = data.first_pass_counts(p.url, since, until, by=("station",), station=station)
    table = yield_from_counts(counts, fp, by=["station"]) if not counts.empty else None
    a, b, c, d = st.columns(4)
    a.metric("Line", str(row["line"]))
    b.metric("State", state, help="the station's latest state change, as the gateway saw it")
    if table is None or table.empty:
        c.metric("Tests in range", "0")
        d.metric("Yield in range", "–")
        return
    t = table.iloc[0]
    fpy = t.get("first_pass_yield")
    shown, label = ((fpy, "First-pass yield") if fpy is not None and not pd.isna(fpy)
                    else (t.get("test_yield"), "Test yield"))
    c.metric("Tests in range", f"{int(t['tests']):,}")
    d.metric(f"{label} in range", "–" if shown is None or pd.isna(shown) else f"{shown:.1%}")


def _leak_chart(p: Page, station: str, program: str | None, since: datetime | None,
                until: datetime | None) -> None:
    u = p.units
    st.subheader("Leak rate against the reject limit")
    band = data.leak_summary(p.url, since, until, bucket="hour", station=station,
                             program=program)
    recent = data.results(p.url, since, until, station=station, program=program,
                          limit=_POINTS, newest_first=True)
    if band.empty and recent.empty:
        st.info("No tests with a leak rate in this range.")
        return
    limits = limits_of(recent, until=pd.Timestamp(until) if until else None)
    points = recent.dropna(subset=["leak_rate_sccm"]).assign(
        leak=lambda f: f["leak_rate_sccm"] * u.q_factor)[
        ["ended_at", "leak", "verdict", "cycle", "program"]]
    events = data.maintenance(p.url, station)
    if since is not None and not events.empty:
        events = events[events["at"] >= pd.Timestamp(since)]
    tz = p.settings.timezone
    cal = data.calibrations(p.url, since, until, station=station, limit=200, newest_first=True)
    cal_marks = pd.DataFrame({
        "ended_at": cal["ended_at"] if not cal.empty else pd.Series(dtype="datetime64[ns, UTC]"),
        "outcome": cal["passed"].map({True: "passed", False: "FAILED"}).fillna("not judged")
        if not cal.empty else pd.Series(dtype=object),
        "program": cal["program"] if not cal.empty else pd.Series(dtype=object),
    })  # fmt: skip
    chart = charts.station_leak(
        charts.plant_clock(points, tz),
        charts.plant_clock(band.assign(bucket_end=band["bucket"] + pd.Timedelta(hours=1),
                                       **{c: band[c] * u.q_factor
                                          for c in ("mean", "min", "max")}), tz),
        charts.plant_clock(limits.assign(value=limits["value"] * u.q_factor), tz),
        charts.plant_clock(events[["at", "kind", "note"]], tz),
        u.q_label, height=260 if printing() else 340,
        calibrations=charts.plant_clock(cal_marks, tz),
    )
    st.altair_chart(chart, width="stretch", key="station_leak_chart")
    reject = limits[limits["what"] == "reject limit"]
    notes = [f"Boxes: each hour's lowest to highest test, its mean as a line; dots: the "
             f"newest {min(len(recent), _POINTS):,} tests by verdict; dashed black: maintenance; "
             "triangles along the bottom: calibrations (vermillion when failed)."]
    if reject.empty:
        notes.append("No reject limit: the station sends none and the gateway config gives "
                     "none for this program.")
    else:
        last = reject.iloc[-1]
        changes = f" ({len(reject)} limit changes in range)" if len(reject) > 1 else ""
        notes.append(f"Reject limit now {fmt(last['value'] * u.q_factor)} {u.q_label}"
                     f"{changes}.")
    if (limits["what"] != "reject limit").any():
        notes.append("The dotted grey line is the lower plausibility limit (readings below "
                     "it are suspect): it is not a reject limit.")
    st.caption(" ".join(notes))


def _calibrations(p: Page, station: str, since: datetime | None, until: datetime | None
                  ) -> None:
    st.subheader("Calibrations")
    cal = data.calibrations(p.url, since, until, station=station, limit=200, newest_first=True)
    if cal.empty:
        st.caption("No calibrations in this range.")
        return
    u = p.units
    passed = cal["passed"].map({True: "passed", False: "FAILED"}) if "passed" in cal else None
    table = pd.DataFrame({
        "When": _when(p, cal["ended_at"]),
        "Program": cal["program"],
        "Outcome": passed if passed is not None else "–",
        f"Master loss [{u.p_label}]": [fmt(u.p(v)) for v in cal["master_loss_pa"]],
        f"Loss with standard [{u.p_label}]": [fmt(u.p(v)) for v in cal["standard_loss_pa"]],
        f"Leak standard [{u.q_label}]": [fmt(u.q(v)) for v in cal["standard_sccm"]],
        "Reason": cal["reason"],
    })  # fmt: skip
    show_table(_text(table), "station_cal_table", rows=5)


def _alarms(p: Page, station: str, since: datetime | None, until: datetime | None) -> None:
    st.subheader("Alarms")
    history = station_data.alarm_history(p.url, station, since, until)
    if history is None:
        st.caption("Alarm states are kept in the gateway's journal; this store is not one.")
        return
    if history.empty:
        st.caption("No alarms for this station in this range.")
        return
    open_now = int((history["state"] != "cleared").sum())
    st.caption(f"{open_now} open, {len(history) - open_now} cleared in this range "
               "(acknowledge open alarms on the Fleet page).")
    order = {"active": 0, "acknowledged": 1, "cleared": 2}
    history = history.assign(_o=history["state"].map(order)).sort_values(
        ["_o", "since"], ascending=[True, False], kind="mergesort")
    table = pd.DataFrame({
        "State": history["state"], "Severity": history["severity"].str.upper(),
        "Since": _when(p, history["since"]), "What": history["message"],
        "Acknowledged": [f"{b} at {t}" if b else "–" for b, t in
                         zip(history["acked_by"], _when(p, history["acked_at"]), strict=True)],
        "Cleared": _when(p, history["cleared_at"]),
    })  # fmt: skip
    show_table(_text(table), "station_alarm_table", rows=5)


def _link(p: Page, station: str, since: datetime | None, until: datetime | None) -> None:
    st.subheader("Link: state changes and gaps")
    left, right = (st.container(), st.container()) if printing() else st.columns(2)
    with left:
        states = data.statuses(p.url, since, until, station=station, limit=200,
                               newest_first=True)
        if states.empty:
            st.caption("No state changes in this range.")
        else:
            show_table(_text(pd.DataFrame({
                "When": _when(p, states["at"]),
                "State": states["state"].map(lambda s: _STATE_WORDS.get(str(s), str(s))),
                "Detail": _short(states["detail"])})), "station_status_table", rows=4)
    with right:
        if not station_data.journal_only(p.url):
            st.caption("Gaps are recorded in the gateway's journal; this store is not one.")
            return
        gaps = data.gaps(p.url)
        gaps = gaps[gaps["station"] == station]
        if since is not None and not gaps.empty:
            gaps = gaps[pd.to_datetime(gaps["at"], utc=True) >= pd.Timestamp(since)]
        if gaps.empty:
            st.caption("No lost cycles on record in this range.")
        else:
            show_table(_text(pd.DataFrame({
                "Noticed": _when(p, gaps["at"]),
                "Cycles lost": [f"{a}–{b}" if a != b else str(a)
                                for a, b in zip(gaps["first"], gaps["last"], strict=True)],
                "Found by": gaps["source"], "Detail": _short(gaps["detail"])})),
                "station_gap_table", rows=4)


def _quarantine(p: Page, station: str, since: datetime | None, until: datetime | None
                ) -> None:
    st.subheader("Quarantined lines")
    q = data.quarantine(p.url, since, until, station=station, limit=200)
    if q.empty:
        st.caption("Nothing from this station was quarantined in this range.")
        return
    st.caption("Input the gateway could not read, kept with its reason (never dropped).")
    raw = _short(q["raw"], 60)
    show_table(_text(pd.DataFrame({
        "Received": _when(p, q["received_at"]), "Profile": q["profile"],
        "Reason": q["reason"], "Line no.": q["line_no"], "As received": raw})),
        "station_quarantine_table", rows=3)


def _maintenance(p: Page, station: str) -> None:
    st.subheader("Maintenance and notes")
    events = data.maintenance(p.url, station)
    if events.empty:
        st.caption("No maintenance recorded (record it on the Fleet page's station detail).")
        return
    events = events.iloc[::-1]
    show_table(_text(pd.DataFrame({
        "When": _when(p, events["at"]), "What": events["kind"], "Note": events["note"],
        "By": events["by"]})), "station_maintenance_table", rows=5)


def _config(p: Page, station: str) -> None:
    st.subheader("Config and profile")
    latest = data.latest(p.url, "result")
    mine = latest[latest["station"] == station]
    seen = str(mine["profile"].iloc[0]) if not mine.empty and "profile" in mine else None
    view = station_data.station_config(p.plant_settings.config_source, station)
    if isinstance(view, str):
        st.caption(f"No config shown: {view}."
                   + (f" The newest result was read with profile {seen}." if seen else ""))
        return
    a, b = st.columns(2)
    label = f" ({view.profile_label})" if view.profile_label != view.profile else ""
    a.markdown(
        f"**Profile** {view.profile}{label}  \n"
        f"**Transport** {view.transport} · **Endpoint** `{view.endpoint}`  \n"
        f"**Poll interval** {fmt(view.poll_interval_s)} s · **Timeout** {fmt(view.timeout_s)} s"
    )
    b.markdown(
        f"**Line** {view.line} · **Station clock zone** {view.timezone}  \n"
        f"**Pressure curves** {'collected' if view.traces else 'not collected'}  \n"
        f"**Config** {view.source}"
        + (f"  \n**Newest result read with** {seen}"
           if seen and not _same_profile(seen, view.profile) else "")
    )
    if view.programs:
        show_table(pd.DataFrame({"Program no.": [n for n, _ in view.programs],
                                 "Program": [name for _, name in view.programs]}),
                   "station_program_table")
    else:
        st.caption("The station sends program names itself (no program table in the config).")
    if view.parameters:
        st.markdown("**Program sheet** (values the gateway fills in when the station sends "
                    "none)")
        show_table(_parameters(p, view.parameters), "station_parameter_table")


def _same_profile(a: str, b: str) -> bool:
    """``lf-kv@1`` and ``lf-kv@1.0`` name the same profile version."""
    def norm(text: str) -> str:
        name, _, version = text.partition("@")
        while version.endswith(".0"):
            version = version[:-2]
        return f"{name}@{version}"

    return norm(a) == norm(b)


_PARAM_LABELS = {
    "reject_limit_sccm": "Reject limit", "lower_limit_sccm": "Lower plausibility limit",
    "fill_s": "Fill [s]", "stabilise_s": "Stabilise [s]", "test_s": "Test [s]",
    "test_pressure_pa": "Test pressure", "part_family": "Part family",
    "standard_sccm": "Leak standard", "standard_ref_pressure_pa": "Standard's reference pressure",
}  # fmt: skip


def _parameters(p: Page, parameters: Any) -> pd.DataFrame:
    u = p.units
    rows = []
    for program, items in parameters:
        row: dict[str, str] = {"Program": "every program" if program == "*" else program}
        for name, value in items:
            label = _PARAM_LABELS.get(name, name)
            if name.endswith("_sccm"):
                row[f"{label} [{u.q_label}]"] = fmt(u.q(value))
            elif name.endswith("_pa"):
                row[f"{label} [{u.p_label}]"] = fmt(u.p(value))
            else:
                row[label] = value if isinstance(value, str) else fmt(value)
        rows.append(row)
    return _text(pd.DataFrame(rows))


p = page("Station")
paper = printing()
if paper:
    hide_for_print()
names = [str(s) for s in p.stations["station"]]
wanted = st.query_params.get("station")
if wanted is not None and wanted not in names:
    st.warning(f"There is no station {wanted!r} in the store; showing {names[0]}.")
asked_range = st.query_params.get("range")
c1, c2, c3 = st.columns(3)
station = c1.selectbox("Station", names, index=names.index(wanted) if wanted in names else 0,
                       key="station_pick")
if station is not None and not paper:
    st.query_params["station"] = station  # the address names the station shown (to share)
with c2:
    since, until = time_range(p, "station_range",
                              asked_range if asked_range in _RANGES else "Last 7 days")
ran = data.programs(p.url)
ran = ran[ran["station"] == station].sort_values("n", ascending=False)
progs = [str(x) for x in ran["program"]]
asked_program = st.query_params.get("program")
program_choice = c3.selectbox(
    "Program", ["All programs", *progs],
    index=(progs.index(asked_program) + 1) if asked_program in progs else (1 if progs else 0),
    key="station_program",
    help="limits are per program: the chart is clearest for one",
)  # fmt: skip
program = None if program_choice == "All programs" else program_choice
chosen = st.session_state.get("station_range", "Last 7 days")
span = "all time" if since is None else f"{p.local(since)} – {p.local(until)}"
st.caption(f"**{station}** · {program or 'all programs'} · {chosen} ({span}, "
           f"{p.settings.timezone})")
if not paper:
    print_link("views/station.py", {"station": station,
                                    **({"range": str(chosen)} if chosen in _RANGES else {}),
                                    **({"program": program} if program else {})})
_summary(p, station, since, until)
_leak_chart(p, station, program, since, until)
_calibrations(p, station, since, until)
_alarms(p, station, since, until)
_maintenance(p, station)
_link(p, station, since, until)
_quarantine(p, station, since, until)
_config(p, station)
