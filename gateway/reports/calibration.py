"""Calibration-health report: ratio, sensitivity, drift projection and alarms."""

from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
from typing import Any

from gateway.reports.common import (
    Filters,
    Report,
    filters_from,
    quantity,
    store_calibrations,
    store_results,
)
from gateway.reports.settings import standards_register
from gateway.reports.tables import num, table


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The CLI's options: the range and filters, the chart settings, the --config register."""
    from analytics import HealthConfig

    f = filters_from(args, get_store=get_store)
    cfg = HealthConfig(
        min_ratio=args.min_ratio,
        master_loss_limit_pa=quantity(
            args.master_loss_limit, "pressure", "Pa", "--master-loss-limit"
        ),
        baseline_points=args.baseline,
        ewma_lambda=args.ewma_lambda,
        cusum_k=args.cusum_k,
        cusum_h=args.cusum_h,
    )
    standards = standards_register(args) if getattr(args, "config", None) else []
    return calibration_report_of(get_store(), f, cfg, standards)


def calibration_report_of(store: Any, f: Filters, health_config: Any,
                          standards: Sequence[Any] = ()) -> Report:
    """Calibration health (control charts, drift projection, alarms) over the store's
    calibrations in ``f``; with a standards register, also standards used off their
    certificate pressure."""
    from analytics import calibration_health

    cfg = health_config
    cals = store_calibrations(store, f)
    if cals.empty:
        return Report(
            "calibration",
            f.to_dict(),
            {"series": [], "alarms": []},
            "No calibration events in the selection.",
        )
    health = calibration_health(cals, cfg)
    rows = []
    for s in health.series:
        p = s.projection
        drift = p.status if p.days_to_limit is None else f"{p.status} in {p.days_to_limit:.1f} d"
        rows.append(
            [
                s.station,
                s.program,
                s.n,
                num(s.master_loss_pa[-1]),
                num(s.standard_loss_pa[-1]),
                num(s.ratio[-1], ".3g"),
                num(s.sensitivity[-1]),
                sum(not x for x in s.passed),
                num(p.slope_per_day),
                drift,
            ]
        )
    text = table(
        [
            "station",
            "program",
            "n",
            "master Pa",
            "standard Pa",
            "ratio",
            "sccm/Pa",
            "failed",
            "drift Pa/day",
            "projection",
        ],
        rows,
    )
    if health.alarms:
        text += "\n\nAlarms\n" + table(
            ["at (UTC)", "station", "program", "kind", "message"],
            [
                [
                    a.at.strftime("%Y-%m-%d %H:%M") if a.at else "",
                    a.station,
                    a.program,
                    a.kind,
                    a.message,
                ]
                for a in health.alarms
            ],
        )
    else:
        text += "\n\nNo alarms."
    result = health.to_dict()
    if standards:
        from analytics.standard_use import pressure_mismatch

        mismatches = pressure_mismatch(store_results(store, f), list(standards))
        result["standard_pressure"] = [m.to_dict() for m in mismatches]
        text += "".join(f"\n\nLeak standard off its certificate pressure: {m.station}: "
                        f"{m.message}" for m in mismatches)
    return Report("calibration", f.to_dict(), result, text)
