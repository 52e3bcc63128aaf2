"""``leakfleet report backdown``: the shortest test a station's long-cycle traces support."""

from __future__ import annotations

import argparse
import json
import math
from typing import Any


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


def _newest(store: Any, method: str, station: str, program: str, column: str) -> float | None:
    frame = getattr(store, method)(None, None, station=station, program=program, limit=1,
                                   newest_first=True)
    if frame.empty or column not in frame or frame[column].isna().all():
        return None
    return float(frame[column].iloc[0])


def _run(args: argparse.Namespace) -> int:
    from analytics.backdown import backdown_map, curve_of
    from gateway.store import open_journal, open_store
    from gateway.store.traces import traces

    if not 0 < args.step <= 60 or args.fixed < 0 or not 0 < args.target < 100:
        raise ValueError("--step: 0..60 s; --fixed: 0 s or more; --target: between 0 and 100")
    with open_journal(args.store) as journal:
        found = traces(journal, args.station, program=args.program, limit=5000)
    found = [t for t in found if t.role in ("master", "standard")]
    if not found:
        raise ValueError(f"no master or standard traces of {args.station} in {args.store} "
                         "(record a long-cycle study first, e.g. 'leakfleet sim study')")
    program = args.program or found[0].program
    found = [t for t in found if t.program == program]
    store = open_store(args.store)
    try:
        tolerance = args.tolerance or _newest(store, "results", args.station, program,
                                              "reject_limit_sccm")
        flow = args.standard_sccm or _newest(store, "calibrations", args.station, program,
                                             "standard_sccm")
    finally:
        store.close()
    if tolerance is None:
        raise ValueError(f"{args.station} {program}: no reject limit on record; give "
                         "--tolerance SCCM")
    if flow is None:
        raise ValueError(f"{args.station} {program}: no calibration with the standard's flow "
                         "on record; give --standard-sccm SCCM")
    master = [curve_of(t) for t in found if t.role == "master"]
    standard = [curve_of(t) for t in found if t.role == "standard"]
    result = backdown_map(master, standard, standard_sccm=flow, tolerance_sccm=tolerance,
                          target_pct=args.target, step_s=args.step, fixed_s=args.fixed)
    if args.json:
        doc = {"station": args.station, "program": program, "standard_sccm": flow,
               **result.to_dict()}
        print(json.dumps(doc, allow_nan=False, indent=2))
        return 0
    print(f"Back-down map for {args.station} {program}: {result.n_master} master and "
          f"{result.n_standard} standard traces of {result.recorded_s:g} s; tolerance "
          f"{tolerance:g} sccm, target {result.target_pct:g} %GRR "
          f"(upper {result.confidence:.0%} bound)")
    c = result.chosen
    if c is not None:
        print(f"Shortest cycle meeting the target: stabilise {c.stabilise_s:g} s + test "
              f"{c.test_s:g} s (cycle {c.cycle_s:g} s): %GRR {c.pct_grr:.1f} "
              f"({c.pct_grr_low:.1f}..{c.pct_grr_high:.1f}), span {c.span_pa:.3g} Pa"
              + (f", ratio {c.ratio:.3g}" if c.ratio is not None else ""))
    if result.longest is not None:
        lp = result.longest
        print(f"Longest window of the recorded curves: stabilise {lp.stabilise_s:g} s + test "
              f"{lp.test_s:g} s: "
              f"%GRR {lp.pct_grr:.1f}")
    print("\nShortest meeting test time per stabilise time:")
    best: dict[float, Any] = {}
    for pt in result.points:
        if pt.verdict == "meets" and (pt.stabilise_s not in best
                                      or pt.test_s < best[pt.stabilise_s].test_s):
            best[pt.stabilise_s] = pt
    shown = sorted(best.values(), key=lambda q: q.stabilise_s)
    stride = max(1, math.ceil(len(shown) / 15))
    print(f"{'stabilise s':>12} {'test s':>8} {'cycle s':>8} {'%GRR':>6} {'upper':>6}")
    for pt in shown[::stride]:
        print(f"{pt.stabilise_s:>12g} {pt.test_s:>8g} {pt.cycle_s:>8g} {pt.pct_grr:>6.1f} "
              f"{pt.pct_grr_high:>6.1f}")
    for line in [*result.checks, *result.notes]:
        print(f"note: {line}")
    print(f"assumptions: {result.assumptions}")
    return 0
