"""``leakfleet sim backfill``: fill a journal with a realistic plant history (sim/backfill.py)."""

from __future__ import annotations

import argparse
import sys
from datetime import datetime
from pathlib import Path


def register(sim_sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sim_sub.add_parser(
        "backfill",
        help="write months of simulated plant history into a journal, fast",
        description=(
            "Write --results test results (and the calibrations that go with them) from the "
            "scenario's stations into a SQLite journal, ending now (or at --end): three shifts, "
            "Sundays off, program batches, retests, seal wear. For the query benchmark and for "
            "trying the dashboard on a year of data. Progress is shown on stderr."
        ),
    )
    parser.add_argument("--results", type=int, required=True, help="number of results to write")
    parser.add_argument(
        "--store", default="sqlite:///./leakfleet.db",
        help="journal URL, sqlite:///path.db (default sqlite:///./leakfleet.db)",
    )
    parser.add_argument(
        "--scenario", default="demo", help="built-in scenario name or scenario TOML (default demo)"
    )
    parser.add_argument("--end", help="ISO 8601 end of the history (default: now)")
    parser.add_argument("--seed", type=int, help="random seed (default: the scenario's)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.set_defaults(func=_run)


def _run(args: argparse.Namespace) -> int:
    from datetime import UTC

    from sim.backfill import backfill, progress_bar

    end = None
    if args.end:
        try:
            end = datetime.fromisoformat(args.end)
        except ValueError:
            raise ValueError(f"--end: expected an ISO 8601 time, got {args.end!r}") from None
        end = end if end.tzinfo else end.replace(tzinfo=UTC)
    scenario: str | Path = args.scenario
    stats = backfill(
        args.store, args.results, scenario=scenario, end=end, seed=args.seed,
        progress=None if args.quiet else progress_bar(sys.stderr),
    )
    print(
        f"wrote {stats.results} results and {stats.calibrations} calibrations "
        f"({stats.first:%Y-%m-%d} to {stats.last:%Y-%m-%d}) to {args.store} in {stats.seconds} s"
    )
    return 0
