"""Master-part report: the repeatability of a known part over time."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import Any

from gateway.reports.common import Report, filters_from, store_results
from gateway.reports.inputs import read_tidy_csv
from gateway.reports.tables import num, table


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The master-part choice from a CSV (--input part,value) or the store's candidate readings."""
    import pandas as pd

    from analytics import qualify_master

    filters: dict[str, Any] | None = None
    if args.input:
        data = read_tidy_csv(args.input, {"part": str, "value": float})
        source = f"file {args.input}"
    else:
        if not args.parts:
            raise ValueError(
                "master from the store needs --parts P1,P2,... (the candidates' part ids)"
            )
        f = filters_from(args, get_store=get_store)
        ids = [p.strip() for p in args.parts.split(",") if p.strip()]
        frames = [store_results(get_store(), f, part_id=p) for p in ids]
        results = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
        results = (
            results[results["verdict"].astype(str) != "aborted"] if not results.empty else results
        )
        if results.empty:
            raise ValueError(f"no results for parts {', '.join(ids)} in the selection")
        data = pd.DataFrame({"part": results["part_id"], "value": results["leak_rate_sccm"]})
        source, filters = f"{len(ids)} candidate part ids from the store", f.to_dict()
    if not 0 < args.alpha < 1:
        raise ValueError(f"--alpha: expected a probability between 0 and 1, got {args.alpha}")
    sel = qualify_master(data, alpha=args.alpha, min_tests=args.min_tests)
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
