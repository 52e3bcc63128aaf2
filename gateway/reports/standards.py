"""Leak-standard register: due dates, overdue use and sensitivity drift."""

from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime
from typing import Any

from gateway.reports.common import (
    Filters,
    Report,
    filters_from,
    pd_iso,
    store_calibrations,
    store_results,
)
from gateway.reports.settings import standards_register, timezone_of
from gateway.reports.tables import num, table


@dataclass(frozen=True)
class StandardsOptions:
    """The register (``LeakStandard`` records), the plant's zone, the day and the horizon."""

    standards: Sequence[Any]
    timezone: str = "UTC"
    today: date | None = None  # None: today in ``timezone``
    within_days: int = 30


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """``leakfleet report standards``: its options, then ``standards_report_of``."""
    standards = standards_register(args)
    if not standards and not args.standards:
        raise ValueError(
            "standards: give --standards FILE.csv or a --config with a [[standards]] register"
        )
    options = StandardsOptions(standards, timezone_of(args),
                               date.fromisoformat(args.today) if args.today else None,
                               args.within)
    if args.no_store:
        return standards_report_of(None, None, options)
    return standards_report_of(get_store(), filters_from(args, get_store=get_store), options)


def standards_report_of(store: Any | None, f: Filters | None,
                        options: StandardsOptions) -> Report:
    """The register's due dates and, with a store, the standards' use in it: calibrations
    run with an overdue standard, sensitivity drift, use off the certificate pressure."""
    from zoneinfo import ZoneInfo

    from analytics import flag_overdue_calibrations, standard_drift, standards_due

    standards = list(options.standards)
    timezone = options.timezone
    today = options.today or datetime.now(UTC).astimezone(ZoneInfo(timezone)).date()
    status = standards_due(standards, today, options.within_days)
    rows = [[s.serial, s.station, num(s.nominal_sccm), s.due_date.isoformat(), s.days_left,
             s.status] for s in status]
    text = (f"Leak standards on {today.isoformat()} (due within {options.within_days} days)\n"
            + table(["serial", "station", "nominal sccm", "due", "days left", "status"], rows))
    result: dict[str, Any] = {
        "today": today.isoformat(),
        "standards": [s.to_dict() for s in status],
    }
    filters = None
    if store is not None and f is not None:
        filters = f.to_dict()
        cals = store_calibrations(store, f)
        overdue_runs: list[dict[str, Any]] = []
        drift: list[dict[str, Any]] = []
        if not cals.empty:
            flagged = flag_overdue_calibrations(cals, standards, timezone)
            bad = flagged[flagged["standard_overdue"]]
            overdue_runs = [
                {
                    "station": str(r["station"]),
                    "program": str(r["program"]),
                    "ended_at": pd_iso(r["ended_at"]),
                    "standard": r["standard_serial"],
                }
                for r in bad.to_dict("records")
            ]
            for s in standards:
                d = standard_drift(cals, s)
                drift.append({"serial": s.serial, "station": s.station, **d.to_dict()})
        from analytics.standard_use import pressure_mismatch

        mismatches = pressure_mismatch(store_results(store, f), standards)
        result |= {"pressure_mismatch": [m.to_dict() for m in mismatches]}
        if mismatches:
            text += "\n\nStandards used off their certificate pressure:"
            text += "".join(f"\n  {m.station}  {m.message}" for m in mismatches)
        result |= {"overdue_calibrations": overdue_runs, "sensitivity_drift": drift}
        text += f"\n\nCalibrations run with an overdue standard: {len(overdue_runs)}"
        text += "".join(
            f"\n  {o['ended_at'][:16]}  {o['station']}  {o['program']}  {o['standard']}"
            for o in overdue_runs[:20]
        )
        if drift:
            text += "\n\nMeasured sensitivity per standard since its certificate\n" + table(
                ["serial", "station", "n", "slope per day", "status"],
                [
                    [d["serial"], d["station"], d["n"], num(d["slope_per_day"]), d["status"]]
                    for d in drift
                ],
            )
    return Report("standards", filters, result, text)
