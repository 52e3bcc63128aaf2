"""Yield report: first-pass and final yield per group, with a Pareto of rejects."""

from __future__ import annotations

import argparse
from collections.abc import Callable, Sequence
from typing import Any, Literal

from gateway.reports.common import Filters, Report, filters_from, span, store_results
from gateway.reports.settings import calendar_of
from gateway.reports.tables import pct, table


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The CLI's options: --by, --pareto, the range and filters, the shift calendar."""
    f = filters_from(args, get_store=get_store)
    by = tuple(b.strip() for b in args.by.split(",") if b.strip())
    return yield_report_of(get_store(), f, by=by, calendar=calendar_of(args),
                           pareto_column=args.pareto)


def yield_report_of(store: Any, f: Filters, *, by: Sequence[str] = (), calendar: Any = None,
                    pareto_column: Literal["reason", "verdict"] = "reason") -> Report:
    """Yield per ``by`` group over the store's results in ``f``, with a Pareto of
    ``pareto_column`` (rejects only, unless the column is the verdict itself)."""
    from analytics import pareto, yield_report

    by = tuple(by)
    results = store_results(store, f)
    report = yield_report(results, by=by, calendar=calendar)
    par = pareto(
        results,
        column=pareto_column,
        verdicts=None if pareto_column == "verdict" else ("reject", "gross"),
    )
    o = report.overall
    lines = [
        f"Yield {span(f)}: {o.tests} tests "
        f"({o.aborted} aborted), {o.parts} parts",
        f"  first-pass yield {pct(o.first_pass_yield)}   final yield {pct(o.final_yield)}   "
        f"retest rate {pct(o.retest_rate)}   test-level yield {pct(o.test_yield)}",
        f"  {report.note}",
    ]
    if report.rows:
        lines += [
            "",
            table(
                [*by, "tests", "parts", "first-pass", "final", "retest", "test-level", "basis"],
                [
                    [
                        *(r.group[k] for k in by),
                        r.tests,
                        r.parts,
                        pct(r.first_pass_yield),
                        pct(r.final_yield),
                        pct(r.retest_rate),
                        pct(r.test_yield),
                        r.basis,
                    ]
                    for r in report.rows
                ],
            ),
        ]
    what = "tests" if pareto_column == "verdict" else "rejects"
    if par.rows:
        lines += [
            "",
            f"Pareto of {pareto_column} ({par.total} {what})",
            table(
                [pareto_column, "n", "share", "cumulative"],
                [[r.category, r.n, pct(r.share), pct(r.cumulative_share)] for r in par.rows[:15]],
            ),
        ]
    return Report(
        "yield", f.to_dict(), {"yield": report.to_dict(), "pareto": par.to_dict()}, "\n".join(lines)
    )
