"""Queries for the station page and the yield comparisons, beside ``dashboard.data``.

The alarm history is the journal's (SQLite only); the station's config comes from the
gateway config file the dashboard was started with (``LEAKFLEET_CONFIG``), loaded with the
gateway's own loader so the page shows what the gateway runs; part families are what the
results carry. Cached like ``dashboard.data``; a store that cannot be read raises
``data.StoreUnavailable``.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any
from urllib.parse import urlsplit, urlunsplit

import pandas as pd
import streamlit as st

from dashboard import data
from gateway.errors import LeakfleetError

__all__ = ["StationConfigView", "alarm_history", "program_families", "station_config"]

_ALARM_COLUMNS = ["id", "station", "severity", "state", "since", "raised_at", "acked_at",
                  "acked_by", "cleared_at", "message"]


@st.cache_data(ttl=data.LIVE_TTL, show_spinner=False)
def alarm_history(url: str, station: str, since: datetime | None,
                  until: datetime | None) -> pd.DataFrame | None:
    """A station's alarms open at some time in [since, until], newest first, with state;
    None when the store is not a journal (alarm states live in the gateway's journal)."""
    rows = data._logbook_call(url, lambda book: book.alarms(since, until))
    if rows is None:
        return None
    frame = pd.DataFrame(
        [{"id": a.id, "station": a.station, "severity": a.severity, "state": a.state,
          "since": a.since, "raised_at": a.raised_at, "acked_at": a.acked_at,
          "acked_by": a.acked_by or "", "cleared_at": a.cleared_at, "message": a.message}
         for a in rows if a.station == station],
        columns=_ALARM_COLUMNS,
    )
    for col in ("since", "raised_at", "acked_at", "cleared_at"):
        frame[col] = pd.to_datetime(frame[col], utc=True)
    return frame.iloc[::-1].reset_index(drop=True)


@dataclass(frozen=True)
class StationConfigView:
    """What the gateway config says about one station, as plain values for a page."""

    station: str
    line: str
    profile: str  # name@version
    profile_label: str
    transport: str
    endpoint: str
    poll_interval_s: float
    timeout_s: float
    timezone: str
    traces: bool
    programs: tuple[tuple[int, str], ...]  # station program number → name
    parameters: tuple[tuple[str, tuple[tuple[str, Any], ...]], ...]  # program → (field, value)
    source: str


def _without_credentials(endpoint: str) -> str:
    parts = urlsplit(endpoint)
    if not parts.scheme or "@" not in parts.netloc:
        return endpoint
    return urlunsplit(parts._replace(netloc=parts.netloc.rpartition("@")[2]))


@st.cache_data(ttl=data.HISTORY_TTL, show_spinner=False)
def station_config(config_ref: str | None, station: str) -> StationConfigView | str:
    """The station's entry in the gateway config, or one line saying why there is none."""
    if not config_ref:
        return ("the dashboard was started without the gateway config "
                "(`leakfleet dashboard --config FILE`)")
    from gateway.config import load_config

    try:
        cfg = load_config(config_ref)
    except LeakfleetError as exc:
        return f"the gateway config cannot be read: {exc}"
    for s in cfg.stations:
        if s.id != station:
            continue
        return StationConfigView(
            station=s.id, line=s.line, profile=f"{s.profile.name}@{s.profile.version}",
            profile_label=s.profile.label, transport=s.profile.transport,
            endpoint=_without_credentials(s.endpoint), poll_interval_s=s.poll_interval_s,
            timeout_s=s.timeout_s, timezone=s.timezone, traces=s.traces,
            programs=tuple(sorted(s.programs.items())),
            parameters=tuple((prog, tuple(params.items()))
                             for prog, params in sorted(s.program_params.items())),
            source=cfg.source,
        )  # fmt: skip
    return f"{config_ref} has no station {station!r} (records from elsewhere, or renamed)"


@st.cache_data(ttl=data.HISTORY_TTL, show_spinner=False)
def program_families(url: str) -> pd.DataFrame:
    """``station, program, part_family`` of each station's newest result per program (the
    family the station or the plant's program sheet stamped on it; NA when none)."""
    pairs = data.programs(url)
    rows = []
    for station, program in zip(pairs["station"], pairs["program"], strict=True):
        newest = data.results(url, station=str(station), program=str(program), limit=1,
                              newest_first=True)
        family = None
        if not newest.empty and "part_family" in newest.columns:
            value = newest["part_family"].iloc[0]
            family = None if pd.isna(value) else str(value)
        rows.append({"station": station, "program": program, "part_family": family})
    return pd.DataFrame(rows, columns=["station", "program", "part_family"])


def journal_only(url: str) -> bool:
    """Whether the store is the gateway's journal (alarm states, gaps, maintenance)."""
    return url.startswith("sqlite:")
