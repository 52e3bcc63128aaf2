"""Widgets and page scaffolding shared by every page: settings, units, time range, guards.

``page()`` is what each page calls first: it reads the settings, renders nothing but an error
line when the store cannot be opened, a hint when it holds no records yet, and otherwise hands
back a ``Page`` with everything the page needs (store URL, stations, "now", units, calendar).
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from zoneinfo import ZoneInfo, available_timezones

import pandas as pd
import streamlit as st

from analytics import ShiftCalendar
from dashboard import data
from dashboard.display import LEAK_UNITS, PRESSURE_UNITS, Units
from dashboard.settings import Settings, load_settings
from gateway.errors import ConfigError

__all__ = [
    "SAFETY_NOTE",
    "TEST_PARAMETER_NOTE",
    "Page",
    "page",
    "pick",
    "refreshed",
    "settings",
    "sidebar",
    "time_range",
]

SAFETY_NOTE = (
    "**Safety.** Leak testing puts parts under pressure. Use parts, fixtures and hoses only "
    "within their pressure ratings, keep guarding in place, and lock out and vent a station "
    "before working on it. Local codes and your qualified personnel take precedence over "
    "anything shown here."
)
TEST_PARAMETER_NOTE = (
    "Changing test parameters (fill, stabilise and test times, pressures, limits) is a "
    "decision for a qualified person who knows the part, the fixture and the customer's "
    "requirements. These figures are advice from a model, not a setting."
)
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
# "now" moves in steps, so reruns and viewers share cached queries: live pages step with their
# refresh, history pages once a minute
_ROUND_LIVE_S = 5
_ROUND_HISTORY_S = 60


@dataclass(frozen=True)
class Page:
    """A page's context. ``settings`` carries the time zone times are shown in (the viewer's
    choice in the sidebar, the plant's by default); ``plant`` the plant's own, which decides
    days and shifts ("today", "this shift", shift reports) whatever the viewer picked."""

    settings: Settings
    url: str
    stations: pd.DataFrame
    now: datetime
    units: Units
    plant: Settings | None = None

    @property
    def plant_settings(self) -> Settings:
        return self.plant if self.plant is not None else self.settings

    @property
    def tz(self) -> ZoneInfo:
        """The plant's zone: where a day and a shift begin."""
        return ZoneInfo(self.plant_settings.timezone)

    @property
    def calendar(self) -> ShiftCalendar:
        return self.plant_settings.calendar

    def local(self, at: datetime | pd.Timestamp | None) -> str:
        if at is None or pd.isna(at):
            return "–"
        return pd.Timestamp(at).tz_convert(self.settings.timezone).strftime("%Y-%m-%d %H:%M:%S")

    def today_start(self) -> datetime:
        local = self.now.astimezone(self.tz)
        return datetime.combine(local.date(), time(0), tzinfo=self.tz).astimezone(UTC)


def settings() -> Settings:
    """The settings, read once per session (st.stop with one line on a config mistake)."""
    if "lf_settings" not in st.session_state:
        try:
            st.session_state["lf_settings"] = load_settings(os.environ)
        except ConfigError as exc:
            st.error(f"Configuration problem: {exc}")
            st.stop()
    value: Settings = st.session_state["lf_settings"]
    return value


def units() -> Units:
    return Units(
        st.session_state.get("lf_pressure_unit", "Pa"), st.session_state.get("lf_leak_unit", "sccm")
    )


def sidebar(cfg: Settings) -> None:
    """Site, display units and the safety note (same on every page)."""
    with st.sidebar:
        if cfg.site:
            st.markdown(f"**{cfg.site}**")
        st.caption(f"Store: `{cfg.store_url}` · plant time zone {cfg.timezone}")
        zones = [cfg.timezone, *(["UTC"] if cfg.timezone != "UTC" else []),
                 *sorted(z for z in available_timezones() if z not in (cfg.timezone, "UTC"))]
        st.selectbox("Times shown in", zones, key="lf_timezone",
                     help="Every time on every page, table and chart in this zone, 24-hour "
                          "clock. Days and shifts stay the plant's.")
        st.selectbox("Pressure unit", PRESSURE_UNITS, key="lf_pressure_unit")
        st.selectbox(
            "Leak-rate unit", LEAK_UNITS, key="lf_leak_unit",
            format_func=lambda u: Units(leak=u).q_label,
        )  # fmt: skip
        st.info(SAFETY_NOTE, icon=":material/warning:")


def _now(cfg: Settings, step_s: int = _ROUND_LIVE_S) -> datetime:
    wall = datetime.now(UTC)
    if cfg.clock == "data":
        newest = data.newest_record_time(cfg.store_url)
        if newest is not None and newest > wall:
            wall = newest
    seconds = (wall - _EPOCH).total_seconds()
    return _EPOCH + timedelta(seconds=int(seconds // step_s + 1) * step_s)


def page(title: str, *, need_data: bool = True, live: bool = False) -> Page:
    """Title, guards and context for a page (see module docstring)."""
    cfg = settings()
    st.header(title)
    try:
        stations = data.stations(cfg.store_url)
        now = _now(cfg, _ROUND_LIVE_S if live else _ROUND_HISTORY_S)
    except data.StoreUnavailable as exc:
        st.error(f"The store cannot be read: {exc}")
        st.caption(
            "Check the store URL (`leakfleet dashboard --store URL`) and that the gateway has "
            "created the journal. This page retries on the next refresh."
        )
        st.stop()
    if need_data and stations.empty:
        st.info(
            "The store holds no records yet. Start the gateway (`leakfleet gateway --config "
            "FILE`) or the demo (`leakfleet demo`) and results will appear here."
        )
        st.stop()
    return Page(_shown(cfg), cfg.store_url, stations, now, units(), plant=cfg)


def _shown(cfg: Settings) -> Settings:
    """The settings with the viewer's display zone (the plant's unless picked otherwise)."""
    zone = st.session_state.get("lf_timezone") or cfg.timezone
    return cfg if zone == cfg.timezone else dataclasses.replace(cfg, timezone=zone)


def refreshed(p: Page) -> Page:
    """The same page context with a fresh "now" and station list (for timed fragments)."""
    try:
        return Page(p.settings, p.url, data.stations(p.url), _now(p.settings), p.units,
                    plant=p.plant)
    except data.StoreUnavailable as exc:
        st.error(f"The store cannot be read: {exc}")
        return p


_RANGES = {
    "Last hour": 1.0,
    "Last 8 hours": 8.0,
    "Last 24 hours": 24.0,
    "Last 7 days": 24.0 * 7,
    "Last 30 days": 24.0 * 30,
}


def time_range(
    p: Page, key: str, default: str = "Last 24 hours"
) -> tuple[datetime | None, datetime | None]:
    """A time-range picker in the plant's time zone: presets, today, this shift, custom, all."""
    options = [*_RANGES, "Today", "Current shift", "Custom", "Everything"]
    choice = st.selectbox("Time range", options, index=options.index(default), key=key)
    until = p.now + timedelta(seconds=1)
    if choice in _RANGES:
        return p.now - timedelta(hours=_RANGES[choice]), until
    if choice == "Today":
        return p.today_start(), until
    if choice == "Current shift":
        found = p.calendar.shift_of(p.now)
        if found is None:
            st.caption("No shift is running now; showing today.")
            return p.today_start(), until
        w = p.calendar.window(*found)
        return w.start, min(w.end, until)
    if choice == "Custom":
        local_today = p.now.astimezone(p.tz).date()
        picked = st.date_input(
            "From – to (local dates)", (local_today - timedelta(days=7), local_today),
            key=f"{key}_dates",
        )  # fmt: skip
        days = list(picked) if isinstance(picked, tuple | list) else [picked]
        if len(days) < 2:
            days = [days[0], days[0]]
        lo: date = days[0]
        hi: date = days[1]
        return (
            datetime.combine(lo, time(0), tzinfo=p.tz).astimezone(UTC),
            datetime.combine(hi + timedelta(days=1), time(0), tzinfo=p.tz).astimezone(UTC),
        )
    return None, None


def pick(label: str, values: list[str], key: str, *, everything: str = "All") -> str | None:
    """A select box with an "All" entry that maps to None (no filter)."""
    choice = st.selectbox(label, [everything, *values], key=key)
    return None if choice == everything else str(choice)
