"""Shift report: one shift's figures per line, as JSON-ready data and text."""

from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import Any

from gateway.reports.common import Report, quantity
from gateway.reports.settings import calendar_of, plant_of, standards_register
from gateway.reports.tables import pct


def shift_date(text: str, timezone: str) -> date:
    from zoneinfo import ZoneInfo

    today = datetime.now(UTC).astimezone(ZoneInfo(timezone)).date()
    word = text.strip().lower()
    if word in ("today", "yesterday"):
        return today - timedelta(days=1 if word == "yesterday" else 0)
    try:
        return date.fromisoformat(text.strip())
    except ValueError:
        raise ValueError(
            f"--date: expected a date YYYY-MM-DD (or today, yesterday), got {text!r}"
        ) from None


@dataclass(frozen=True)
class ShiftOptions:
    """What one shift report covers; the defaults are the CLI's."""

    day: date
    shift: str
    line: str | None = None
    history_days: float = 7.0
    within_days: int = 30
    guard_band_sccm: float | None = None
    min_ratio: float | None = None
    master_loss_limit_pa: float | None = None
    standards: Sequence[Any] = ()
    plant_stations: Sequence[tuple[str, str]] | None = None  # (station, line) from a config
    config_source: str | None = None
    site: str = ""
    target_first_pass_yield: float | None = None  # a fraction, e.g. 0.975
    pressure_unit: str = "Pa"  # shown on the printed page (the figures stay canonical)
    leak_unit: str = "sccm"


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The CLI's options as ``ShiftOptions``; mistakes name the option."""
    calendar = calendar_of(args)
    day = shift_date(args.date, calendar.timezone)
    if args.shift not in calendar.names:
        raise ValueError(
            f"--shift: unknown shift {args.shift!r}; the calendar has {', '.join(calendar.names)}"
        )
    if not (0 <= args.history <= 366):
        raise ValueError(f"--history: expected 0..366 days, got {args.history:g}")
    if args.within < 0:
        raise ValueError(f"--within: expected days ≥ 0, got {args.within}")
    standards = standards_register(args)
    master_loss = quantity(args.master_loss_limit, "pressure", "Pa", "--master-loss-limit")
    guard = quantity(args.guard_band, "leak", "sccm", "--guard-band")
    plant = plant_of(args)
    target = getattr(args, "target_yield", None)
    if target is not None and not 0 < target <= 100:
        raise ValueError(f"--target-yield: expected a percentage in (0, 100], got {target:g}")
    site = getattr(args, "site", None) or ("" if plant is None else plant.site)
    options = ShiftOptions(
        site=site, target_first_pass_yield=None if target is None else target / 100,
        pressure_unit=getattr(args, "pressure_unit", "Pa"),
        leak_unit=getattr(args, "leak_unit", "sccm"),
        day=day, shift=args.shift, line=args.line, history_days=args.history,
        within_days=args.within, guard_band_sccm=guard, min_ratio=args.min_ratio,
        master_loss_limit_pa=master_loss, standards=standards,
        plant_stations=None if plant is None else [(st.id, st.line) for st in plant.stations],
        config_source=None if plant is None else plant.source,
    )  # fmt: skip
    return shift_report_of(get_store(), calendar, options)


def shift_report_of(store: Any, calendar: Any, options: ShiftOptions) -> Report:
    """One shift's report from ``store`` (QueryStore methods) in ``calendar``'s time zone;
    used by ``leakfleet report shift`` and the dashboard's shift page alike."""
    import pandas as pd

    from analytics import HealthConfig, shift_report
    from analytics.shift_compare import previous_window

    o = options
    window = calendar.window(o.day, o.shift)
    health = HealthConfig(min_ratio=o.min_ratio, master_loss_limit_pa=o.master_loss_limit_pa)
    since = window.start - timedelta(days=o.history_days)
    prev = previous_window(calendar, window)
    # one read for this shift's history and the previous shift's (they overlap but for a
    # shift's length)
    first = since if prev is None else min(since, prev.start - timedelta(days=o.history_days))
    both = store.results(first, window.end, line=o.line)
    ended = pd.to_datetime(both["ended_at"], utc=True) if len(both) else None
    results = both[ended >= pd.Timestamp(since)].reset_index(drop=True) if ended is not None \
        else both
    cals = store.calibrations(window.end - timedelta(days=o.history_days), window.end,
                              line=o.line)  # fmt: skip
    stations = store.stations() if hasattr(store, "stations") else None
    if o.plant_stations is not None:  # stations the plant has, whether or not they reported yet
        known = pd.DataFrame(list(o.plant_stations), columns=["station", "line"])
        if stations is not None and len(stations):
            known = known[~known["station"].isin(stations["station"].astype(str))]
            stations = pd.concat([stations[["station", "line"]], known], ignore_index=True)
        else:
            stations = known
    if stations is not None and o.line is not None:
        stations = stations[stations["line"].astype("string") == o.line]
    statuses = None
    if hasattr(store, "statuses"):
        names = set(stations["station"].astype(str)) if stations is not None else set()
        names |= set(results["station"].astype(str)) if len(results) else set()
        frames = [store.statuses(window.start, window.end)]
        frames += [
            store.statuses(None, window.start, station=n, limit=1, newest_first=True)
            for n in sorted(names)
        ]
        frames = [f for f in frames if len(f)]
        statuses = pd.concat(frames, ignore_index=True) if frames else None
    prior = None
    if prev is not None:
        prior = (both[ended < pd.Timestamp(prev.end)].reset_index(drop=True)
                 if ended is not None else both)
    targets = ({} if o.target_first_pass_yield is None
               else {"first_pass_yield": o.target_first_pass_yield})
    r = shift_report(
        window, calendar, results, cals, statuses, stations, list(o.standards),
        history_since=since, within_days=o.within_days, guard_band=o.guard_band_sccm,
        health=health, line=o.line, site=o.site, alarms=journal_alarms(store, window),
        targets=targets, previous_results=prior,
    )  # fmt: skip
    result = r.to_dict()
    result["units"] = {"pressure": o.pressure_unit, "leak": o.leak_unit}
    filters = {
        "date": o.day.isoformat(),
        "shift": o.shift,
        "line": o.line,
        "since": window.start.isoformat(),
        "until": window.end.isoformat(),
        "config": o.config_source,
    }
    return Report("shift", filters, result, shift_text(result, calendar))


def journal_alarms(store: Any, window: Any) -> list[Any] | None:
    """The journal's alarm occurrences open during the shift (None for a store with no alarm
    table, e.g. InfluxDB): the list the dashboard shows, read without writing."""
    path = getattr(store, "path", None)
    if path is None:
        return None
    from gateway.store.logbook import read_alarms

    return read_alarms(path, window.start, window.end)


def shift_text(r: dict[str, Any], calendar: Any) -> str:
    """The shift report as plain text (the table view of the same document)."""
    start = datetime.fromisoformat(r["start"]).astimezone(calendar.tz)
    end = datetime.fromisoformat(r["end"]).astimezone(calendar.tz)
    site = f"{r['site']}: " if r.get("site") else ""
    lines = [
        f"{site}Shift {r['shift_date']} {r['shift']}: {start:%Y-%m-%d %H:%M} – "
        f"{end:%Y-%m-%d %H:%M} ({r['timezone']}), {r['tests']} tests"
    ]
    if not r["has_data"]:
        lines.append(f"  {r['note']}")
    for sec in r["lines"]:
        rt = sec["retests"]
        lines += [
            "",
            f"Line {sec['line']}: {sec['tests']} tests, {sec['parts']} parts; first-pass yield "
            f"{pct(sec['first_pass_yield'])}, final yield {pct(sec['final_yield'])}; "
            f"{rt['passed_after_retest']} of {rt['passes']} passes needed a retest "
            f"({pct(rt['share'])})" + (f"; {sec['note']}" if sec["note"] else ""),
        ]
        for c in sec.get("comparison", []):
            if c["previous"] is None and c["target"] is None:
                continue
            fig = (lambda v: "–" if v is None else f"{v:.0f}") if c["figure"] == "tests" else pct
            extra = f", target {pct(c['target'])}" if c["target"] is not None else ""
            lines.append(f"  {c['label']}: {fig(c['this'])}, previous shift "
                         f"{fig(c['previous'])}{extra}")
        if sec["rejects"]["rows"]:
            lines.append(
                "  rejects: "
                + ", ".join(f"{x['category']} {x['n']}" for x in sec["rejects"]["rows"][:8])
            )
        for s in sec["stations"]:
            lines.append(
                f"  {s['station']}: {s['tests']} tests, calibration {s['calibration_state']}"
                + (f" (last {s['last_calibration_at'][:16]})" if s["last_calibration_at"] else "")
                + (f", standard {s['standard_serial']}" if s["standard_serial"] else "")
                + ("" if s.get("alarm_state") is None else f", alarms {s['alarm_state']}"
                   + (f" ({s['open_alarms']} open)" if s["open_alarms"] else ""))
            )
        lines += [f"  alarm {a['station']} ({a['state_at_end']} at the end): {a['message']}"
                  for a in sec.get("journal_alarms", [])]
        lines += [f"  found {a['station']}: {a['message']}" for a in sec["alarms"]]
        lines += [
            f"  standard {x['serial']} ({x['station']}) due {x['due_date']}: {x['status']}"
            for x in sec["standards"]
            if x["status"] != "ok"
        ]
    return "\n".join(lines)
