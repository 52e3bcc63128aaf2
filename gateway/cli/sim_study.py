"""``leakfleet sim study``: a long-cycle calibration study with pressure traces, into a journal."""

from __future__ import annotations

import argparse


def register(sim_sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sim_sub.add_parser(
        "study",
        help="record simulated long-cycle master and leak-standard tests with their traces",
        description=(
            "Runs a scenario station's program at one long stabilise and test time, first on "
            "the master part (--masters tests) and then with the leak standard open "
            "(--standards tests), and writes each test's pressure trace to the journal: the "
            "input of 'leakfleet report backdown'. The physics are the station's own (volume, "
            "pressure, fill heating and its thermal settling, seal leak, noise)."
        ),
        epilog="example: leakfleet sim study --station L1-S1 --program HX-210 "
        "--store sqlite:///leakfleet.db",
    )
    parser.add_argument("--station", required=True, help="scenario station")
    parser.add_argument("--program", help="program name (default: the station's first)")
    parser.add_argument("--scenario", default="demo", help="scenario (default demo)")
    parser.add_argument("--store", default="sqlite:///./leakfleet.db", metavar="URL",
                        help="journal (default sqlite:///./leakfleet.db)")
    parser.add_argument("--masters", type=int, default=20, help="master-part tests (default 20)")
    parser.add_argument("--standards", type=int, default=6,
                        help="tests with the leak standard open (default 6)")
    parser.add_argument("--stabilise", type=float, default=30.0, metavar="S",
                        help="long stabilise time, s (default 30)")
    parser.add_argument("--test", type=float, default=30.0, metavar="S",
                        help="long test time, s (default 30)")
    parser.add_argument("--interval", type=float, default=0.1, metavar="S",
                        help="sample interval, s (default 0.1)")
    parser.add_argument("--seed", type=int, default=0)
    parser.set_defaults(func=_run)


def _run(args: argparse.Namespace) -> int:
    from gateway.store import open_journal
    from sim.scenario import load_scenario
    from sim.trace_study import study

    for name in ("stabilise", "test", "interval"):
        value = getattr(args, name)
        if not 0 < value <= 3600:
            raise ValueError(f"--{name}: expected above 0 and at most 3600 s, got {value:g}")
    sc = load_scenario(args.scenario)
    stations = {s.name: s for s in sc.stations}
    if args.station not in stations:
        raise ValueError(f"no station {args.station!r} in scenario {args.scenario} "
                         f"(stations: {', '.join(sorted(stations))})")
    st = stations[args.station]
    program = args.program or next(iter(st.programs.values()))
    traces = study(sc, st, program, masters=args.masters, standards=args.standards,
                   stabilise_s=args.stabilise, test_s=args.test, interval_s=args.interval,
                   seed=args.seed)
    with open_journal(args.store) as journal:
        stats = journal.write(traces)
    print(f"wrote {stats.inserted} trace(s) of {args.station} {program} "
          f"({args.masters} master, {args.standards} standard; stabilise {args.stabilise:g} s, "
          f"test {args.test:g} s) to {args.store}")
    return 0
