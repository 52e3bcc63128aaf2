"""Data: a filtered table of results, calibrations or state changes with CSV / Parquet download,
and the quarantine (input that could not be read, with the raw line and the reason)."""

from __future__ import annotations

import io

import pandas as pd
import streamlit as st

from dashboard import data, tables
from dashboard.common import page, pick, time_range
from dashboard.display import cut_note, labelled
from dashboard.export import to_xlsx

_QUARANTINE_ROWS = 1000

p = page("Data")
tab_records, tab_quarantine = st.tabs(["Records", "Quarantine"])
with tab_records:
    c1, c2, c3, c4 = st.columns(4)
    with c1:
        kind = st.selectbox("Kind", ["results", "calibrations", "state changes"], key="data_kind")
    with c2:
        since, until = time_range(p, "data_range", "Last 24 hours")
    with c3:
        station = pick("Station", list(p.stations["station"]), "data_station")
    with c4:
        limit = st.number_input("Rows (newest first)", 10, 100_000, 1000, step=100,
                                key="data_limit")  # fmt: skip
    c5, c6 = st.columns(2)
    with c5:
        program = pick("Program", sorted(data.programs(p.url)["program"].unique()),
                       "data_program")  # fmt: skip
    with c6:
        part = st.text_input("Part id", key="data_part").strip() or None
    if kind == "results":
        frame = data.results(p.url, since, until, station=station, program=program,
                             part_id=part, limit=int(limit), newest_first=True)  # fmt: skip
    elif kind == "calibrations":
        frame = data.calibrations(p.url, since, until, station=station, program=program,
                                  limit=int(limit), newest_first=True)  # fmt: skip
    else:
        frame = data.statuses(p.url, since, until, station=station, limit=int(limit),
                              newest_first=True)  # fmt: skip
    total: int | None = len(frame)
    if len(frame) >= int(limit):  # cut: say by how much when the summaries can tell
        total = None
        if kind == "results" and program is None and part is None:
            counts = data.verdict_counts(p.url, since, until, by=(), station=station)
            total = int(counts["n"].sum()) if not counts.empty else None
    st.caption(
        f"{len(frame):,} row(s), newest first; times in {p.settings.timezone}; values in the "
        "units chosen in the sidebar (the CSV and Parquet downloads keep the field names, the "
        "canonical units Pa and sccm, and UTC)"
    )
    note = cut_note(len(frame), total) if len(frame) >= int(limit) else None
    if note:
        st.caption(note)
    shown = labelled(frame, p.units, p.settings.timezone)
    tables.show(shown, key="data_table")
    stem = f"leakfleet-{kind.replace(' ', '-')}"
    d1, d2, d3 = st.columns(3)
    d1.download_button("Download CSV", frame.to_csv(index=False).encode(), f"{stem}.csv",
                       "text/csv", key="data_csv")  # fmt: skip
    d3.download_button("Download Excel", to_xlsx(shown, p.settings.timezone, kind),
                       f"{stem}.xlsx",
                       "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
                       key="data_xlsx")  # fmt: skip
    buf = io.BytesIO()
    frame.to_parquet(buf, index=False)
    d2.download_button("Download Parquet", buf.getvalue(), f"{stem}.parquet",
                       "application/vnd.apache.parquet", key="data_parquet")  # fmt: skip

with tab_quarantine:
    q = data.quarantine(p.url, None, None, station=station, limit=_QUARANTINE_ROWS)
    if q.empty:
        st.success("Nothing in quarantine: every line and register block was readable.")
    else:
        q = q.assign(received_at=pd.to_datetime(q["received_at"], utc=True)
                     .dt.tz_convert(p.settings.timezone))  # fmt: skip
        st.caption(f"{len(q):,} newest rejected input(s)")
        if len(q) >= _QUARANTINE_ROWS:
            st.caption(cut_note(len(q), None, "rejected inputs"))
        tables.show(labelled(q[["received_at", "station", "profile", "reason", "raw",
                                "line_no"]], p.units, p.settings.timezone),
                    key="quarantine_table")  # fmt: skip
