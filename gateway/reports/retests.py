"""Retest audit: parts passed after a reject, marginal passes, alarms."""

from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
from typing import Any, Literal

from gateway.reports.common import Filters, Report, filters_from, quantity, store_results
from gateway.reports.settings import calendar_of
from gateway.reports.tables import num, pct, table


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The CLI's options: the range and filters, --by, --guard-band, --alarm-period."""
    f = filters_from(args, get_store=get_store)
    by = tuple(b.strip() for b in args.by.split(",") if b.strip())
    for key in by:
        if key not in ("station", "program", "line", "shift", "day"):
            raise ValueError(f"--by: cannot group retests by {key!r}")
    calendar = calendar_of(args)
    guard = quantity(args.guard_band, "leak", "sccm", "--guard-band")
    return retests_report_of(get_store(), f, by=by, calendar=calendar, guard_band_sccm=guard,
                             alarm_period=args.alarm_period)


def retests_report_of(
    store: Any, f: Filters, *, by: Sequence[str] = (), calendar: Any = None,
    guard_band_sccm: float | None = None, alarm_period: Literal["day", "shift"] = "day",
) -> Report:
    """Parts passed only after a reject, marginal passes and retest alarms over the store's
    results in ``f``."""
    from analytics import retest_analysis

    by = tuple(by)
    results = store_results(store, f)
    r = retest_analysis(
        results, by=by, calendar=calendar, guard_band=guard_band_sccm, alarm_period=alarm_period
    )
    lines = [
        f"Retests: {r.parts} parts with ids, {r.passed_parts} passed, {r.passed_after_retest} "
        f"of them only on a retest ({pct(r.share_of_passes_after_retest)} of passes); {r.note}",
        "Passed only after ≥ 2 rejects: "
        + (", ".join(r.passed_after_two_or_more_rejects) or "none"),
    ]
    if r.by_group:
        lines += [
            "",
            table(
                [*by, "passes", "after retest", "share"],
                [
                    [*(g[k] for k in by), g["passes"], g["passed_after_retest"], pct(g["share"])]
                    for g in r.by_group
                ],
            ),
        ]
    if r.marginal_passes:
        lines += [
            "",
            "Marginal passes after a reject (in the guard band)",
            table(
                ["part", "station", "ended (UTC)", "leak sccm", "limit", "rejects before"],
                [
                    [
                        m["part_id"],
                        m["station"],
                        str(m["ended_at"])[:19],
                        num(m["leak_rate_sccm"]),
                        num(m["reject_limit_sccm"]),
                        m["rejects_before"],
                    ]
                    for m in r.marginal_passes
                ],
            ),
        ]
    lines += ["", "Alarms: " + ("none" if not r.alarms else "")]
    lines += [f"  {a.message}" for a in r.alarms]
    return Report("retests", f.to_dict(), r.to_dict(), "\n".join(lines))
