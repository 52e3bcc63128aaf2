"""Shift report: one shift's figures per line, as JSON-ready data and text."""

from __future__ import annotations

import argparse
from collections.abc import Callable
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


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    import pandas as pd

    from analytics import HealthConfig, shift_report

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
    window = calendar.window(day, args.shift)
    standards = standards_register(args)
    health = HealthConfig(
        min_ratio=args.min_ratio,
        master_loss_limit_pa=quantity(
            args.master_loss_limit, "pressure", "Pa", "--master-loss-limit"
        ),
    )
    since = window.start - timedelta(days=args.history)
    store = get_store()
    results = store.results(since, window.end, line=args.line)
    cals = store.calibrations(window.end - timedelta(days=args.history), window.end,
                              line=args.line)  # fmt: skip
    stations = store.stations() if hasattr(store, "stations") else None
    plant = plant_of(args)
    if plant is not None:  # stations the plant has, whether or not they have reported yet
        known = pd.DataFrame(
            [(st.id, st.line) for st in plant.stations], columns=["station", "line"]
        )
        if stations is not None and len(stations):
            known = known[~known["station"].isin(stations["station"].astype(str))]
            stations = pd.concat([stations[["station", "line"]], known], ignore_index=True)
        else:
            stations = known
    if stations is not None and args.line is not None:
        stations = stations[stations["line"].astype("string") == args.line]
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
    r = shift_report(
        window, calendar, results, cals, statuses, stations, standards,
        history_since=since, within_days=args.within,
        guard_band=quantity(args.guard_band, "leak", "sccm", "--guard-band"),
        health=health, line=args.line,
    )  # fmt: skip
    result = r.to_dict()
    filters = {
        "date": day.isoformat(),
        "shift": args.shift,
        "line": args.line,
        "since": window.start.isoformat(),
        "until": window.end.isoformat(),
        "config": None if plant is None else plant.source,
    }
    return Report("shift", filters, result, shift_text(result, calendar))


def shift_text(r: dict[str, Any], calendar: Any) -> str:
    """The shift report as plain text (the table view of the same document)."""
    start = datetime.fromisoformat(r["start"]).astimezone(calendar.tz)
    end = datetime.fromisoformat(r["end"]).astimezone(calendar.tz)
    lines = [
        f"Shift {r['shift_date']} {r['shift']}: {start:%Y-%m-%d %H:%M} – {end:%Y-%m-%d %H:%M} "
        f"({r['timezone']}), {r['tests']} tests"
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
            )
        lines += [f"  alarm {a['station']}: {a['message']}" for a in sec["alarms"]]
        lines += [
            f"  standard {x['serial']} ({x['station']}) due {x['due_date']}: {x['status']}"
            for x in sec["standards"]
            if x["status"] != "ok"
        ]
    return "\n".join(lines)
