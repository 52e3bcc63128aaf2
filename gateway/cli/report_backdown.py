"""``leakfleet report backdown``: options only; the report is ``gateway.reports.backdown``."""

from __future__ import annotations

import argparse
import json


def register(kinds: argparse._SubParsersAction[argparse.ArgumentParser],
             common: argparse.ArgumentParser) -> None:
    p = kinds.add_parser(
        "backdown",
        parents=[common],
        help="shortest stabilise + test time from long-cycle pressure traces (%%GRR map)",
        description=(
            "From a station's recorded long-cycle traces (master part, and master part with the "
            "leak standard open; 'leakfleet sim study' records simulated ones), emulates every "
            "shorter stabilise and test time as a window of the curves, and reports %GRR against "
            "the tolerance and the calibration span for each, and the shortest cycle that meets "
            "the target at the upper confidence bound. Advice for a qualified person, not a "
            "setting: confirm a shorter cycle with real tests before using it."
        ),
    )
    p.add_argument("--store", default="sqlite:///./leakfleet.db", metavar="URL",
                   help="journal holding the traces (default sqlite:///./leakfleet.db)")
    p.add_argument("--station", required=True, help="station whose traces to use")
    p.add_argument("--program", help="program (default: the newest traces' program)")
    p.add_argument("--tolerance", type=float, metavar="SCCM",
                   help="tolerance %%GRR is judged against (default: the program's reject "
                   "limit from its newest result)")
    p.add_argument("--standard-sccm", type=float, metavar="SCCM",
                   help="the leak standard's flow (default: the newest calibration's)")
    p.add_argument("--target", type=float, default=10.0, metavar="PCT",
                   help="%%GRR target (default 10)")
    p.add_argument("--step", type=float, default=1.0, metavar="S",
                   help="grid step of stabilise and test times, s (default 1)")
    p.add_argument("--fixed", type=float, default=0.0, metavar="S",
                   help="the cycle's fixed part (fill, dump, handling), s, added to each cycle")
    p.set_defaults(func=_run)


def _run(args: argparse.Namespace) -> int:
    from gateway.reports.backdown import build_backdown

    report = build_backdown(args.store, args.station, program=args.program,
                            tolerance=args.tolerance, standard_sccm=args.standard_sccm,
                            target=args.target, step=args.step, fixed=args.fixed)
    if args.json:
        print(json.dumps(report.to_json(), allow_nan=False, indent=2))
    else:
        print(report.text())
    return 0
