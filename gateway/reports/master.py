"""Master-part report: the repeatability of a known part over time."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from gateway.reports.common import Filters, Report, filters_from, store_results
from gateway.reports.inputs import read_tidy_csv
from gateway.reports.tables import num, table


@dataclass(frozen=True)
class MasterOptions:
    """Which candidate parts (store) or which file (``input``: part,value), and the test."""

    parts: tuple[str, ...] = ()
    input: str | None = None
    alpha: float = 0.05
    min_tests: int = 3


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """``leakfleet report master``: its options, then ``master_report_of``."""
    parts = tuple(p.strip() for p in (args.parts or "").split(",") if p.strip())
    options = MasterOptions(parts, args.input, args.alpha, args.min_tests)
    if options.input:
        return master_report_of(None, None, options)
    if not options.parts:
        raise ValueError("master from the store needs --parts P1,P2,... (the candidates' part ids)")
    return master_report_of(get_store(), filters_from(args, get_store=get_store), options)


def master_report_of(store: Any | None, f: Filters | None, options: MasterOptions) -> Report:
    """The master-part choice from a CSV or the store's readings of the candidate parts."""
    import pandas as pd

    from analytics import qualify_master

    filters: dict[str, Any] | None = None
    if options.input:
        data = read_tidy_csv(options.input, {"part": str, "value": float})
        source = f"file {options.input}"
    else:
        if not options.parts:
            raise ValueError(
                "master from the store needs --parts P1,P2,... (the candidates' part ids)"
            )
        if store is None or f is None:
            raise ValueError("master from the store needs the store and its filters")
        ids = list(options.parts)
        frames = [store_results(store, f, part_id=p) for p in ids]
        results = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
        results = (
            results[results["verdict"].astype(str) != "aborted"] if not results.empty else results
        )
        if results.empty:
            raise ValueError(f"no results for parts {', '.join(ids)} in the selection")
        data = pd.DataFrame({"part": results["part_id"], "value": results["leak_rate_sccm"]})
        source, filters = f"{len(ids)} candidate part ids from the store", f.to_dict()
    if not 0 < options.alpha < 1:
        raise ValueError(f"--alpha: expected a probability between 0 and 1, got {options.alpha}")
    sel = qualify_master(data, alpha=options.alpha, min_tests=options.min_tests)
    text = (
        f"Master-part qualification ({source}): chosen {sel.chosen or 'none'}\n"
        + table(
            ["part", "n", "mean", "std", "min", "max", "rank (mean)", "rank (std)", "decision"],
            [
                [
                    c.part,
                    c.n,
                    num(c.mean),
                    num(c.std),
                    num(c.min),
                    num(c.max),
                    c.rank_mean,
                    c.rank_std if c.rank_std is not None else "–",
                    c.reason,
                ]
                for c in sel.candidates
            ],
        )
        + f"\n  rule: {sel.rule}"
        + (f"\n  {sel.note}" if sel.note else "")
    )
    return Report("master", filters, {"source": source, **sel.to_dict()}, text)
