"""Part history: every test of one part, in order."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import Any

from gateway.reports.common import Filters, Report, filters_from, store_calibrations, store_results
from gateway.reports.tables import num, table


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The CLI's options: the part id, the range and filters."""
    f = filters_from(args, get_store=get_store)
    return part_report_of(get_store(), f, args.part_id)


def part_report_of(store: Any, f: Filters, part_id: str) -> Report:
    """Every test of ``part_id`` in ``f``, in order, each with the calibration in force."""
    from analytics import part_history

    results = store_results(store, f, part_id=part_id)
    cals = store_calibrations(store, Filters(f.since, f.until)) if not results.empty else None
    h = part_history(results, cals, part_id)
    if not h.tests:
        text = f"Part {part_id}: no tests in the selection."
    else:
        text = (
            f"Part {part_id}: {h.note}; final verdict {h.final_verdict}"
            + (f" after {h.rejects_before_pass} reject(s)" if h.rejects_before_pass else "")
            + "\n"
            + table(
                [
                    "ended (UTC)",
                    "station",
                    "program",
                    "cycle",
                    "verdict",
                    "leak sccm",
                    "limit",
                    "calibration (UTC)",
                    "master Pa",
                    "standard Pa",
                ],
                [
                    [
                        t.ended_at.strftime("%Y-%m-%d %H:%M:%S"),
                        t.station,
                        t.program,
                        t.cycle,
                        t.verdict,
                        num(t.leak_rate_sccm),
                        num(t.reject_limit_sccm),
                        t.calibration_at.strftime("%Y-%m-%d %H:%M") if t.calibration_at else "none",
                        num(t.master_loss_pa),
                        num(t.standard_loss_pa),
                    ]
                    for t in h.tests
                ],
            )
        )
    return Report("part", f.to_dict(), h.to_dict(), text)
