"""Gateway and sink health: what integrators and IT look at when data seem late or missing.

Per station: its link state and since when, the newest result's age, link drops and
quarantined lines over the last day (the quarantine rate per hour as a chart). Per sink: how
many records wait to be forwarded and how long the oldest has waited. The same figures are
Prometheus metrics; this page needs no metrics server.
"""

from __future__ import annotations

from datetime import timedelta
from typing import Any

import altair as alt
import pandas as pd
import streamlit as st

from dashboard import charts, data
from dashboard.common import page

p = page("Gateway & sink health", live=True)
tz = p.settings.timezone
day = p.now - timedelta(days=1)

status = data.latest(p.url, "status").set_index("station")
results = data.latest(p.url, "result").set_index("station")
statuses = data.statuses(p.url, day, p.now + timedelta(seconds=1))
quarantine = data.quarantine(p.url, day, p.now + timedelta(seconds=1))


def _ago(value: Any) -> str:
    if value is None or pd.isna(value):
        return "never"
    s = (p.now - pd.Timestamp(value).to_pydatetime()).total_seconds()
    if s < 0:
        return "ahead of now"
    return f"{s:.0f} s" if s < 120 else f"{s / 60:.0f} min" if s < 7200 else f"{s / 3600:.1f} h"


rows = []
for station, line in zip(p.stations["station"], p.stations["line"], strict=True):
    mine = statuses[statuses["station"] == station] if not statuses.empty else statuses
    drops = int((mine["state"].isin(["offline", "fault"])).sum()) if not mine.empty else 0
    bad = int((quarantine["station"] == station).sum()) if not quarantine.empty else 0
    known = station in status.index
    rows.append({
        "Station": station, "Line": line,
        "Link": str(status.loc[station, "state"]) if known else "unknown",
        "In this state for": _ago(status.loc[station, "at"]) if known else "–",
        "Newest result, age": _ago(results.loc[station, "ended_at"])
        if station in results.index else "never",
        "Link drops, 24 h": drops,
        "Quarantined lines, 24 h": bad,
    })  # fmt: skip
st.subheader("Stations")
st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch", key="health_stations")

st.subheader("Quarantine per hour")
if quarantine.empty:
    st.caption("Nothing quarantined in the last 24 hours.")
else:
    # by station (a cable, a setting) or by profile (a format the profile does not cover)
    by = st.radio("Per", ["station", "profile"], horizontal=True, key="health_quarantine_by")
    q = quarantine.assign(hour=pd.to_datetime(quarantine["received_at"], utc=True).dt.floor("h"))
    if by not in q.columns:
        q[by] = "–"
    per_hour = charts.plant_clock(q.groupby(["hour", by]).size().reset_index(name="n"), tz)
    st.altair_chart(
        alt.Chart(per_hour).mark_bar().encode(
            x=alt.X("hour:T", title=f"hour ({tz})", axis=alt.Axis(format="%H:%M")),
            y=alt.Y("n:Q", title="quarantined lines per hour"),
            color=alt.Color(f"{by}:N", title=by),
            tooltip=[by, alt.Tooltip("n:Q", title="quarantined lines")],
        ).properties(height=220),
        width="stretch",
    )  # fmt: skip

st.subheader("Sinks")
backlog = data.sink_backlogs(p.url)
if backlog.empty:
    st.caption(
        "No sink has forwarded anything from this journal yet (or the store is not a "
        "gateway journal)."
    )
else:
    shown = backlog.assign(
        oldest=[
            ("never sent one (the sink may not carry them)" if not sent else _ago(t)) if n
            else "–"
            for t, n, sent in zip(backlog["oldest"], backlog["waiting"], backlog["ever_sent"],
                                  strict=True)
        ]
    )
    st.dataframe(shown.rename(columns={"sink": "Sink", "kind": "Records", "waiting": "Waiting",
                                       "oldest": "Oldest waiting for"})
                 [["Sink", "Records", "Waiting", "Oldest waiting for"]],
                 hide_index=True, width="stretch", key="health_sinks")  # fmt: skip

st.subheader("Conflicting re-sends")
clashes = data.conflicts(p.url)
if clashes.empty:
    st.caption("No station has re-sent a stored record with other values.")
else:
    st.caption("The stored record stays; the differing re-send is kept here with both raw "
               "inputs. A reset station clock or counter, or a corrected result, causes these.")
    st.dataframe(
        clashes.assign(detected_at=pd.to_datetime(clashes["detected_at"], utc=True)
                       .dt.tz_convert(tz).dt.strftime("%Y-%m-%d %H:%M:%S"))
        .rename(columns={"detected_at": "Seen", "station": "Station", "kind": "Record",
                         "reason": "What differs", "stored_raw": "Stored (raw)",
                         "new_raw": "Re-sent (raw)"})
        [["Seen", "Station", "Record", "What differs", "Stored (raw)", "Re-sent (raw)"]],
        hide_index=True, width="stretch", key="health_conflicts",
    )  # fmt: skip

st.subheader("Lost cycles (gaps)")
lost = data.gaps(p.url)
if lost.empty:
    st.caption("No gap recorded: every cycle the stations numbered has arrived.")
else:
    st.caption("Cycles a station ran that never reached the journal: overwritten in its ring "
               "before they could be read (ring), or numbers skipped in what arrived (sequence).")
    st.dataframe(
        lost.assign(at=pd.to_datetime(lost["at"], utc=True).dt.tz_convert(tz)
                    .dt.strftime("%Y-%m-%d %H:%M:%S"))
        .rename(columns={"at": "Recorded", "station": "Station", "first": "First cycle",
                         "last": "Last cycle", "source": "Found by", "detail": "Detail"}),
        hide_index=True, width="stretch", key="health_gaps",
    )  # fmt: skip
