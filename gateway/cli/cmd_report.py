"""``leakfleet report``: yield, capability, calibration health, gauge studies, test-time advice,
audit reports (part history, retests, leak standards) and the printable shift report.

Thin wiring: this module defines and parses the options; ``gateway.reports`` reads the store
or CSV file and builds the report from ``analytics`` figures, and the result prints as a table
or, with ``--json``, as one JSON document ``{"schema": 1, "kind": ..., "filters": ...,
"result": ...}``.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable
from pathlib import Path

from gateway.reports.common import DEFAULT_SHIFTS, DEFAULT_STORE

ORDER = 40
STORE_HELP = f"store URL (default: the --config journal, else {DEFAULT_STORE})"
CONFIG_HELP = (
    "gateway config (a file, or demo): its journal, time zone, [shifts] and [[standards]] "
    "are the defaults; the options here override them"
)

# ----------------------------------------------------------------------------- arguments


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "report",
        help="yield, capability, calibration health, gauge R&R, type 1, test-time advice",
        description=(
            "Statistics over the journal (or another store) or over a CSV file. Prints a "
            "readable table; --json prints one JSON document instead."
        ),
    )
    kinds = parser.add_subparsers(dest="report_kind", metavar="KIND", required=True)

    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--json", action="store_true", help="print one JSON document")
    source = argparse.ArgumentParser(add_help=False)
    source.add_argument("--store", help=STORE_HELP)
    source.add_argument("--config", metavar="FILE|demo", help=CONFIG_HELP)
    source.add_argument(
        "--since", help="start: ISO 8601 date/time (UTC unless it has an offset) or e.g. 7d, 12h"
    )
    source.add_argument(
        "--until",
        help="end (exclusive), same forms; default: now, or just after the newest result or "
        "calibration in the store when that is later (a simulator running at --speed stamps "
        "records ahead of the clock)",
    )
    source.add_argument("--station", help="only this station")
    source.add_argument("--line", help="only this line")
    source.add_argument("--program", help="only this test program")
    shifts = argparse.ArgumentParser(add_help=False)
    shifts.add_argument(
        "--timezone",
        help="plant time zone (IANA) for day and shift, e.g. Europe/Berlin (default: the "
        "--config timezone, else UTC)",
    )
    shifts.add_argument(
        "--shifts",
        help="shift calendar NAME=HH:MM-HH:MM,... on the local clock (default: the --config "
        f"[shifts], else {DEFAULT_SHIFTS})",
    )
    csv_input = argparse.ArgumentParser(add_help=False)
    csv_input.add_argument(
        "--input", metavar="FILE.csv", help="read a tidy CSV file instead of the store"
    )

    from gateway.cli import report_backdown

    report_backdown.register(kinds, common)

    p = kinds.add_parser(
        "yield",
        parents=[common, source, shifts],
        help="first-pass yield, final yield, retest rate, reject Pareto",
        description=(
            "First-pass yield (a part's first test decides; falls back to test-level yield "
            "when results carry no part id), final yield after retests and retest rate, "
            "overall and by station, line, program, part, day or shift; plus a Pareto of "
            "reject reasons."
        ),
    )
    p.add_argument(
        "--by",
        default="station",
        help="comma-separated groupings: station,line,program,part,day,shift (default station)",
    )
    p.add_argument(
        "--pareto",
        choices=("reason", "verdict"),
        default="reason",
        help="Pareto of reject reasons (default) or of all verdicts",
    )
    p.set_defaults(func=_handler("yield"))

    p = kinds.add_parser(
        "capability",
        parents=[common, source],
        help="leak readings against the reject limit: Ppu/Cpu, ppm, guard band, histogram",
        description=(
            "One-sided capability of leak rates against the reject limit per program (and "
            "station with --by-station): Ppu and Cpu with 95 % intervals, expected ppm, a "
            "non-normal estimate and which model the data support."
        ),
    )
    p.add_argument("--by-station", action="store_true", help="one study per station and program")
    p.add_argument(
        "--guard-band", help="guard band below the limit, e.g. 0.5sccm (default 10 %% of tolerance)"
    )
    p.add_argument(
        "--bins", type=int, help="fixed number of histogram bins (default Freedman–Diaconis)"
    )
    p.set_defaults(func=_handler("capability"))

    p = kinds.add_parser(
        "calibration",
        parents=[common, source],
        help="calibration health: EWMA/CUSUM on master loss and sensitivity, alarms, drift",
        description=(
            "Per station and program: master loss, standard loss, ratio and sensitivity over "
            "time; EWMA and CUSUM charts (target and sigma from the first calibrations); "
            "alarms for chart signals, low ratio and failed calibrations; when the master "
            "loss reaches its limit at the current drift rate."
        ),
    )
    p.add_argument(
        "--min-ratio", type=float, help="alarm when ratio (standard/master loss) is below"
    )
    p.add_argument("--master-loss-limit", help="master loss limit for the projection, e.g. 40Pa")
    p.add_argument(
        "--baseline", type=int, default=10, help="calibrations used for target/sigma (10)"
    )
    p.add_argument("--ewma-lambda", type=float, default=0.2, help="EWMA weight λ (0.2)")
    p.add_argument("--cusum-k", type=float, default=0.5, help="CUSUM reference value k in σ (0.5)")
    p.add_argument("--cusum-h", type=float, default=5.0, help="CUSUM decision interval h in σ (5)")
    p.set_defaults(func=_handler("calibration"))

    p = kinds.add_parser(
        "grr",
        parents=[common, source, csv_input],
        help="crossed gauge R&R by ANOVA and by average and range",
        description=(
            "Crossed gauge R&R (AIAG MSA 4th ed.). --input FILE.csv with columns part,operator,"
            "value (trials in file order); from the store, parts are part ids tested on several "
            "stations and the stations act as operators (leak rate in sccm)."
        ),
    )
    p.add_argument("--tolerance", help="tolerance for %%GRR of tolerance, e.g. 4sccm")
    p.set_defaults(func=_handler("grr"))

    p = kinds.add_parser(
        "type1",
        parents=[common, source, csv_input],
        help="type 1 gauge study (Cg, Cgk) of one reference part",
        description=(
            "Type 1 study: Cg = 0.2·T/(6s), Cgk = (0.1·T − |bias|)/(3s), both ≥ 1.33. --input "
            "FILE.csv with a value column, plus --reference and --tolerance; from the store, "
            "the results of --part (reference 0 sccm by default: a master part reads zero)."
        ),
    )
    p.add_argument("--part", help="part id of the reference part (store mode)")
    p.add_argument("--reference", help="reference value, e.g. 0sccm")
    p.add_argument("--tolerance", help="tolerance T, e.g. 4sccm")
    p.set_defaults(func=_handler("type1"))

    p = kinds.add_parser(
        "advise",
        parents=[common, source, csv_input],
        help="test-time advice: predicted %%GRR vs test time, shortest time meeting a target",
        description=(
            "From the master part's repeated losses at the current test time and the "
            "calibration's sensitivity, predict %GRR against the reject limit as a function of "
            "test time. From the store: the master losses of the calibrations of one station "
            "and program; --input FILE.csv: a loss column (Pa) plus --test-time, "
            "--sensitivity and --reject-limit."
        ),
    )
    p.add_argument("--target", type=float, default=10.0, help="target %%GRR (default 10)")
    p.add_argument("--test-time", help="current test time, e.g. 6s")
    p.add_argument("--sensitivity", type=float, help="calibration sensitivity in sccm per Pa")
    p.add_argument("--reject-limit", help="reject limit, e.g. 2sccm")
    p.add_argument("--lower-limit", help="lower limit, e.g. -2sccm")
    p.add_argument(
        "--sqrt-fraction",
        type=float,
        default=0.0,
        help="share of the loss variance growing with test time (white noise), 0..1 (default 0)",
    )
    p.add_argument("--max-test-time", help="longest acceptable test time, e.g. 30s")
    p.add_argument("--test-pressure",
                   help="with --input test_s,loss: the test pressure, e.g. 350kPa, to keep a "
                        "reject-limit leak's loss under 10 %% of it")
    p.set_defaults(func=_handler("advise"))

    p = kinds.add_parser(
        "master",
        parents=[common, source, csv_input],
        help="master-part qualification: rank candidates, pick one, show the evidence",
        description=(
            "Rank candidate master parts by mean reading (lowest first) and repeatability and "
            "pick the lowest-reading part that repeats tightly. --input FILE.csv with columns "
            "part,value; from the store, --parts lists the candidates' part ids."
        ),
    )
    p.add_argument("--parts", help="comma-separated candidate part ids (store mode)")
    p.add_argument(
        "--alpha", type=float, default=0.05,
        help="significance of the test that excludes a loosely repeating candidate (0.05)"
    )
    p.add_argument("--min-tests", type=int, default=3, help="readings needed per candidate (3)")
    p.set_defaults(func=_handler("master"))

    p = kinds.add_parser(
        "part",
        parents=[common, source],
        help="one part's history: every test and retest with the calibration in force",
        description=(
            "Every test of PART_ID across all stations, oldest first, with the calibration in "
            "force at each test (the station's latest calibration of that program before it)."
        ),
    )
    p.add_argument("part_id", metavar="PART_ID", help="the part's id (serial number)")
    p.set_defaults(func=_handler("part"))

    p = kinds.add_parser(
        "retests",
        parents=[common, source, shifts],
        help="retest-until-pass: parts that passed only on a retest, marginal passes, alarms",
        description=(
            "Parts that failed and later passed, by station/program/shift; the share of passes "
            "that needed a retest; parts that passed only after two or more rejects; passes in "
            "the guard band after a reject; an alarm when a station's retest share jumps in a "
            "day or shift (binomial test against its other days or shifts)."
        ),
    )
    p.add_argument("--by", default="station", help="station,program,shift,day (default station)")
    p.add_argument("--guard-band", help="guard band below the limit, e.g. 0.2sccm (10 %% of limit)")
    p.add_argument("--alarm-period", choices=("day", "shift"), default="day", help="alarm period")
    p.set_defaults(func=_handler("retests"))

    p = kinds.add_parser(
        "standards",
        parents=[common, source],
        help="leak standards due or overdue; calibrations run with an overdue standard",
        description=(
            "Reads the leak-standard register from --standards FILE.csv (columns serial, "
            "station, nominal_sccm, reference_pressure_pa, certificate_date and due_date or "
            "interval_months; optional uncertainty_pct) or the [[standards]] of the gateway "
            "--config, and lists which are due within --within "
            "days or overdue; with a store, flags calibrations run with an overdue standard and "
            "the measured sensitivity's drift per standard."
        ),
    )
    p.add_argument(
        "--standards", metavar="FILE.csv", help="leak-standard register (default: --config's)"
    )
    p.add_argument("--within", type=int, default=30, help="days ahead that count as due (30)")
    p.add_argument("--today", help="the date to judge on (default today, plant time zone)")
    p.add_argument(
        "--timezone", help="plant time zone for dates (default: --config's, else UTC)"
    )
    p.add_argument("--no-store", action="store_true", help="register only, do not read the store")
    p.set_defaults(func=_handler("standards"))

    p = kinds.add_parser(
        "shift",
        parents=[common, shifts],
        help="one shift per line: yield, rejects, retests, calibration state, alarms, standards",
        description=(
            "The report of one shift (--date, --shift on the plant's local clock), one section "
            "per line: first-pass and final yield, rejects by reason, the share of passes that "
            "needed a retest, each station's calibration state and the alarms raised, and the "
            "leak standards due. --html FILE writes it as one self-contained printable page "
            "(A4 or Letter); --json prints the same figures. Parts count in the shift of their "
            "first test; a pass that needed a retest counts in the shift where it ran."
        ),
    )
    p.add_argument("--store", help=STORE_HELP)
    p.add_argument("--config", metavar="FILE|demo", help=CONFIG_HELP)
    p.add_argument(
        "--date", required=True, help="production date YYYY-MM-DD (a night shift's start date)"
    )
    p.add_argument("--shift", required=True, help="shift name from the calendar, e.g. early")
    p.add_argument("--line", help="only this line")
    p.add_argument("--html", metavar="FILE", help="also write the report as one HTML file")
    p.add_argument(
        "--paper", choices=("a4", "letter"), default="a4", help="print page size (a4)"
    )
    p.add_argument(
        "--standards", metavar="FILE.csv", help="leak-standard register (default: --config's)"
    )
    p.add_argument("--within", type=int, default=30, help="days ahead that count as due (30)")
    p.add_argument(
        "--history",
        type=float,
        default=7.0,
        metavar="DAYS",
        help="days before the shift read for retests, retest alarms and calibration charts (7)",
    )
    p.add_argument("--guard-band", help="guard band below the limit, e.g. 0.2sccm (10 %% of limit)")
    p.add_argument(
        "--min-ratio", type=float, help="alarm when a calibration's ratio is below this"
    )
    p.add_argument("--master-loss-limit", help="master loss limit for the drift projection")
    p.add_argument("--target-yield", metavar="PCT", type=float,
                   help="first-pass yield target in percent, e.g. 97.5 (none by default)")
    p.add_argument("--site", help="site name in the header (default: the --config's site)")
    p.add_argument("--pressure-unit", default="Pa", choices=("Pa", "kPa", "mbar", "psi"),
                   help="pressure unit shown (Pa)")
    p.add_argument("--leak-unit", default="sccm", choices=("sccm", "mbar*L/s", "Pa*m3/s"),
                   help="leak-rate unit shown (sccm)")
    p.set_defaults(func=_shift_handler)


def _handler(kind: str) -> Callable[[argparse.Namespace], int]:
    def run(args: argparse.Namespace) -> int:
        from gateway.reports import build_report

        report = build_report(kind, args)
        if args.json:
            print(json.dumps(report.to_json(), allow_nan=False, indent=2))
        else:
            print(report.to_text())
        return 0

    return run


def _shift_handler(args: argparse.Namespace) -> int:
    """Build the shift report; write the HTML page when asked, print JSON or text."""
    from gateway.reports import build_report

    report = build_report("shift", args)
    document = report.to_json()
    if args.html:
        page = report.to_html(paper=args.paper)
        try:
            Path(args.html).write_text(page, encoding="utf-8")
        except OSError as exc:
            raise ValueError(f"--html {args.html}: cannot write ({exc.strerror})") from None
        print(f"wrote {args.html}", file=sys.stderr)
    if not report.result["has_data"]:
        print(f"leakfleet report shift: note: {report.result['note']}", file=sys.stderr)
    print(json.dumps(document, allow_nan=False, indent=2) if args.json else report.to_text())
    return 0



if __name__ == "__main__":  # pragma: no cover
    from gateway.cli import main

    sys.exit(main(["report", *sys.argv[1:]]))
