"""``leakfleet report``: yield, capability, calibration health, gauge studies, test-time advice,
audit reports (part history, retests, leak standards) and the printable shift report.

The edge between a store (or a CSV file) and ``analytics``: this module reads, the analytics
functions compute, and the result prints as a table or, with ``--json``, as one JSON document
``{"schema": 1, "kind": ..., "filters": ..., "result": ...}``.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import re
import sys
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

if TYPE_CHECKING:
    import pandas as pd

ORDER = 40
SCHEMA = 1
DEFAULT_STORE = "sqlite:///./leakfleet.db"
DEFAULT_SHIFTS = "early=06:00-14:00,late=14:00-22:00,night=22:00-06:00"
STORE_HELP = f"store URL (default: the --config journal, else {DEFAULT_STORE})"
CONFIG_HELP = (
    "gateway config (a file, or demo): its journal, time zone, [shifts] and [[standards]] "
    "are the defaults; the options here override them"
)
KINDS = (
    "yield",
    "capability",
    "calibration",
    "grr",
    "type1",
    "advise",
    "master",
    "part",
    "retests",
    "standards",
    "shift",
)

_RELATIVE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([smhdw])\s*$")
_SECONDS = {"s": 1, "m": 60, "h": 3600, "d": 86400, "w": 7 * 86400}


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
    p.set_defaults(func=_shift_handler)


def _handler(kind: str) -> Callable[[argparse.Namespace], int]:
    def run(args: argparse.Namespace) -> int:
        report = build_report(kind, args)
        if args.json:
            print(json.dumps(report.document(), allow_nan=False, indent=2))
        else:
            print(report.text)
        return 0

    return run


# ----------------------------------------------------------------------------- inputs


@dataclass(frozen=True)
class Filters:
    since: datetime
    until: datetime
    station: str | None = None
    line: str | None = None
    program: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "since": self.since.isoformat(),
            "until": self.until.isoformat(),
            "station": self.station,
            "line": self.line,
            "program": self.program,
        }


def _span(f: Filters) -> str:
    """The range for a heading; the default start (everything stored) is said in words."""
    end = f"{f.until:%Y-%m-%d %H:%M} UTC"
    if f.since == datetime(1970, 1, 1, tzinfo=UTC):
        return f"everything stored until {end}"
    return f"{f.since:%Y-%m-%d %H:%M} .. {end}"


def parse_time(text: str, now: datetime, what: str) -> datetime:
    """ISO 8601 date or date-time (naive = UTC), or a span before ``now`` such as 7d / 12h."""
    m = _RELATIVE.match(text)
    if m:
        return now - timedelta(seconds=float(m.group(1)) * _SECONDS[m.group(2)])
    try:
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text.strip()):
            d = date.fromisoformat(text.strip())
            return datetime(d.year, d.month, d.day, tzinfo=UTC)
        value = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise ValueError(
            f"{what}: expected an ISO 8601 date/time or a span like 7d, 12h; got {text!r}"
        ) from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)


def newest_record_time(store: Any) -> datetime | None:
    """End time of the newest result or calibration in ``store`` (None: it holds neither)."""
    import pandas as pd

    newest: list[datetime] = []
    for frame in (store.latest_results_per_station(), store.latest_calibration_per_station()):
        if not frame.empty:
            newest.append(pd.Timestamp(frame["ended_at"].max()).to_pydatetime())
    return max(newest, default=None)


def filters_from(
    args: argparse.Namespace,
    now: datetime | None = None,
    get_store: Callable[[], Any] | None = None,
) -> Filters:
    """The report's range and filters. Without ``--until`` the end is ``now``, moved to just
    after the newest record in the store when that is later: station clocks that run ahead
    (the simulator at ``--speed``, a clock set wrong) would otherwise hide their newest
    results, as the dashboard's data clock also avoids."""
    now = now or datetime.now(UTC)
    # both texts first: a typo is reported before any store is opened
    since = (
        parse_time(args.since, now, "--since")
        if getattr(args, "since", None)
        else datetime(1970, 1, 1, tzinfo=UTC)
    )
    if getattr(args, "until", None):
        until = parse_time(args.until, now, "--until")
    else:
        until = now
        newest = newest_record_time(get_store()) if get_store is not None else None
        if newest is not None and newest >= until:
            until = newest + timedelta(microseconds=1)
    if since >= until:
        raise ValueError(
            f"--since ({since.isoformat()}) must be before --until ({until.isoformat()})"
        )
    return Filters(since, until, args.station, args.line, args.program)


def _quantity(text: str | None, kind: str, default_unit: str, what: str) -> float | None:
    if text is None:
        return None
    from gateway.units import parse_quantity

    try:
        return parse_quantity(text, kind, default_unit=default_unit).canonical  # type: ignore[arg-type]
    except ValueError as exc:
        raise ValueError(f"{what}: {exc}") from None


def read_tidy_csv(path: str, columns: dict[str, type]) -> pd.DataFrame:
    """Read a CSV with a header; ``columns`` maps required names to float or str.

    Errors name the file, line and column: ``data.csv:7: column 'value': expected a number``.
    """
    import pandas as pd

    file = Path(path)
    try:
        handle = file.open(newline="", encoding="utf-8-sig")
    except OSError as exc:
        raise ValueError(f"{path}: cannot open ({exc.strerror})") from None
    with handle:
        reader = csv.reader(handle)
        try:
            header = next(reader)
        except StopIteration:
            raise ValueError(
                f"{path}: empty file; expected a header with {', '.join(columns)}"
            ) from None
        except csv.Error as exc:
            raise ValueError(f"{path}:1: {exc}") from None
        names = [h.strip().lower() for h in header]
        missing = [c for c in columns if c not in names]
        if missing:
            raise ValueError(
                f"{path}:1: missing column(s) {', '.join(repr(c) for c in missing)} in the header "
                f"(found {', '.join(repr(n) for n in names)})"
            )
        index = {c: names.index(c) for c in columns}
        rows: dict[str, list[Any]] = {c: [] for c in columns}
        try:
            for record in reader:
                line_no = reader.line_num
                if not record or all(not cell.strip() for cell in record):
                    continue
                for col, kind in columns.items():
                    i = index[col]
                    cell = record[i].strip() if i < len(record) else ""
                    if not cell:
                        raise ValueError(f"{path}:{line_no}: column {col!r}: empty value")
                    if kind is float:
                        try:
                            number = float(cell)
                        except ValueError:
                            raise ValueError(
                                f"{path}:{line_no}: column {col!r}: expected a number, got {cell!r}"
                            ) from None
                        if not math.isfinite(number):
                            raise ValueError(
                                f"{path}:{line_no}: column {col!r}: expected a finite "
                                f"number, got {cell!r}"
                            )
                        rows[col].append(number)
                    else:
                        rows[col].append(cell)
        except csv.Error as exc:
            raise ValueError(f"{path}:{reader.line_num}: {exc}") from None
    if not rows[next(iter(columns))]:
        raise ValueError(f"{path}: no data rows after the header")
    return pd.DataFrame(rows)


def _open_store(url: str) -> Any:
    try:
        from gateway.store import open_store  # type: ignore[attr-defined,unused-ignore]
    except ImportError as exc:
        from gateway.errors import StoreError

        raise StoreError(f"store support is not available in this build ({exc})") from None
    return open_store(url)


def _store_results(store: Any, f: Filters, **extra: Any) -> pd.DataFrame:
    return store.results(
        f.since, f.until, station=f.station, line=f.line, program=f.program, **extra
    )


def _store_calibrations(store: Any, f: Filters) -> pd.DataFrame:
    return store.calibrations(f.since, f.until, station=f.station, line=f.line, program=f.program)


# ----------------------------------------------------------------------------- reports


@dataclass
class Report:
    kind: str
    filters: dict[str, Any] | None
    result: Any  # JSON-ready
    text: str

    def document(self) -> dict[str, Any]:
        return {"schema": SCHEMA, "kind": self.kind, "filters": self.filters, "result": self.result}


def _known_ids(store: Any, args: argparse.Namespace) -> Any:
    """A --station or --line the store has never seen is a typo, not "no tests": say so,
    with the close ones."""
    import difflib

    for option, column in (("station", "station"), ("line", "line")):
        wanted = getattr(args, option, None)
        stations = getattr(store, "stations", None)
        if not wanted or not callable(stations):
            continue
        frame = stations()
        if frame is None or column not in frame or frame.empty:
            continue
        known = sorted({str(v) for v in frame[column].dropna()})
        if wanted not in known:
            close = difflib.get_close_matches(wanted, known, n=3, cutoff=0.5)
            hint = f"; did you mean {', '.join(close)}?" if close else ""
            raise ValueError(f"--{option} {wanted!r}: no such {option} in the store "
                             f"({len(known)} known: {', '.join(known[:8])}"
                             f"{' ...' if len(known) > 8 else ''}){hint}")
    return store


def build_report(kind: str, args: argparse.Namespace, store: Any | None = None) -> Report:
    """Compute one report; ``store`` (any object with the QueryStore methods) or --store URL."""
    builders: dict[str, Callable[[argparse.Namespace, Callable[[], Any]], Report]] = {
        "yield": _yield,
        "capability": _capability,
        "calibration": _calibration,
        "grr": _grr,
        "type1": _type1,
        "advise": _advise,
        "master": _master,
        "part": _part,
        "retests": _retests,
        "standards": _standards,
        "shift": _shift,
    }
    opened: list[Any] = []

    def get_store() -> Any:
        if store is not None:
            return _known_ids(store, args)
        if not opened:
            opened.append(_known_ids(_open_store(_store_url(args)), args))
        return opened[0]

    try:
        return builders[kind](args, get_store)
    finally:
        for s in opened:
            close = getattr(s, "close", None)
            if callable(close):
                close()


def _pct(value: float | None, digits: int = 1) -> str:
    return (
        "–"
        if value is None or (isinstance(value, float) and math.isnan(value))
        else f"{100 * value:.{digits}f} %"
    )


def _num(value: float | None, fmt: str = ".4g") -> str:
    return (
        "–"
        if value is None or (isinstance(value, float) and math.isnan(value))
        else format(value, fmt)
    )


def table(headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    """Plain-text table with columns padded to their widest cell."""
    body = [[str(c) for c in row] for row in rows]
    widths = [
        max(len(h), *(len(r[i]) for r in body)) if body else len(h) for i, h in enumerate(headers)
    ]
    line = "  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True))
    out = [line, "  ".join("-" * w for w in widths)]
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)) for r in body]
    return "\n".join(line.rstrip() for line in out)


def _plant(args: argparse.Namespace) -> Any | None:
    """The gateway config named by --config (loaded once per command), or None."""
    ref = getattr(args, "config", None)
    if not ref:
        return None
    cached = getattr(args, "_plant_config", None)
    if cached is None:
        from gateway.config import load_config

        cached = load_config(ref)
        args._plant_config = cached
    return cached


def _store_url(args: argparse.Namespace) -> str:
    """--store, else the --config journal, else the default journal."""
    if getattr(args, "store", None):
        return str(args.store)
    plant = _plant(args)
    return str(plant.store) if plant is not None else DEFAULT_STORE


def _timezone(args: argparse.Namespace) -> str:
    if getattr(args, "timezone", None):
        return str(args.timezone)
    plant = _plant(args)
    return str(plant.timezone) if plant is not None else "UTC"


def _calendar(args: argparse.Namespace) -> Any:
    """The shift calendar: --shifts, else the config's [shifts], else the default three."""
    from analytics import ShiftCalendar

    timezone = _timezone(args)
    if getattr(args, "shifts", None):
        return ShiftCalendar(timezone, _parse_shifts(args.shifts))
    plant = _plant(args)
    if plant is None or not plant.shifts:
        return ShiftCalendar(timezone, _parse_shifts(DEFAULT_SHIFTS))
    values = dict(plant.shifts)
    for name, value in values.items():
        if not isinstance(value, str) or not re.fullmatch(
            r"\s*\d{1,2}:\d{2}\s*(-\s*\d{1,2}:\d{2}\s*)?", value
        ):
            raise ValueError(
                f"{plant.source}: shifts.{name}: expected a local start time \"HH:MM\" or a "
                f"span \"HH:MM-HH:MM\", got {value!r}"
            )
    spans = [("-" in v) for v in values.values()]
    try:
        if all(spans):
            return ShiftCalendar(
                timezone, _parse_shifts(",".join(f"{n}={v}" for n, v in values.items()))
            )
        if any(spans):
            raise ValueError("give every shift as a start time, or every shift as a span")
        starts = {n: v.strip().zfill(5) for n, v in values.items()}
        return ShiftCalendar.from_starts(timezone, starts)
    except ValueError as exc:
        raise ValueError(f"{plant.source}: shifts: {exc}") from None


def _register(args: argparse.Namespace) -> list[Any]:
    """The leak-standard register: --standards FILE.csv, else the config's [[standards]]."""
    if getattr(args, "standards", None):
        return _read_standards(args.standards)
    plant = _plant(args)
    if plant is None:
        return []
    return [_config_standard(plant.source, i, t) for i, t in enumerate(plant.standards)]


def _config_standard(source: str, i: int, table: Any) -> Any:
    """One [[standards]] table as a LeakStandard; mistakes name the file and key."""
    from analytics import LeakStandard
    from gateway.units import parse_quantity

    serial = table.get("serial")
    where = f"{source}: standards[{serial if isinstance(serial, str) else i}]"
    allowed = ("serial", "station", "nominal", "reference_pressure", "certificate_date",
               "due_date", "interval_months", "uncertainty_pct")  # fmt: skip
    for key in table:
        if key not in allowed:
            raise ValueError(f"{where}.{key}: expected one of {', '.join(allowed)} (unknown key)")

    def text(key: str) -> str:
        value = table.get(key)
        if not isinstance(value, str) or not value.strip():
            raise ValueError(f"{where}.{key}: expected a non-empty string, got {value!r}")
        return value.strip()

    def quantity(key: str, kind: str, unit: str) -> float:
        value = table.get(key)
        if isinstance(value, bool) or not isinstance(value, int | float | str):
            raise ValueError(f"{where}.{key}: expected a value like \"3 {unit}\", got {value!r}")
        try:
            return float(parse_quantity(str(value), kind, default_unit=unit).canonical)  # type: ignore[arg-type]
        except ValueError as exc:
            raise ValueError(f"{where}.{key}: {exc}") from None

    def day(key: str) -> date | None:
        value = table.get(key)
        if value is None:
            return None
        if isinstance(value, date) and not isinstance(value, datetime):
            return value
        try:
            return date.fromisoformat(str(value))
        except ValueError:
            raise ValueError(f"{where}.{key}: expected a date YYYY-MM-DD, got {value!r}") from None

    months = table.get("interval_months")
    if months is not None and (isinstance(months, bool) or not isinstance(months, int)):
        raise ValueError(f"{where}.interval_months: expected a whole number, got {months!r}")
    uncertainty = table.get("uncertainty_pct")
    if uncertainty is not None and (
        isinstance(uncertainty, bool) or not isinstance(uncertainty, int | float)
    ):
        raise ValueError(f"{where}.uncertainty_pct: expected a number, got {uncertainty!r}")
    certificate = day("certificate_date")
    if certificate is None:
        raise ValueError(f"{where}.certificate_date: expected a date YYYY-MM-DD (required)")
    try:
        return LeakStandard(
            serial=text("serial"),
            station=text("station"),
            nominal_sccm=quantity("nominal", "leak", "sccm"),
            reference_pressure_pa=quantity("reference_pressure", "pressure", "Pa"),
            certificate_date=certificate,
            due_date=day("due_date"),
            interval_months=months,
            uncertainty_pct=None if uncertainty is None else float(uncertainty),
        )
    except ValueError as exc:
        raise ValueError(f"{where}: {exc}") from None


def _parse_shifts(text: str) -> list[tuple[str, str, str]]:
    shifts = []
    for item in text.split(","):
        m = re.fullmatch(r"\s*([^=\s]+)\s*=\s*(\d{1,2}:\d{2})\s*-\s*(\d{1,2}:\d{2})\s*", item)
        if not m:
            raise ValueError(f"--shifts: expected NAME=HH:MM-HH:MM, got {item.strip()!r}")
        start, end = (t if len(t) == 5 else "0" + t for t in (m.group(2), m.group(3)))
        shifts.append((m.group(1), start, end))
    return shifts


def _yield(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import pareto, yield_report

    f = filters_from(args, get_store=get_store)
    by = tuple(b.strip() for b in args.by.split(",") if b.strip())
    calendar = _calendar(args)
    results = _store_results(get_store(), f)
    report = yield_report(results, by=by, calendar=calendar)
    par = pareto(
        results,
        column=args.pareto,
        verdicts=None if args.pareto == "verdict" else ("reject", "gross"),
    )
    o = report.overall
    lines = [
        f"Yield {_span(f)}: {o.tests} tests "
        f"({o.aborted} aborted), {o.parts} parts",
        f"  first-pass yield {_pct(o.first_pass_yield)}   final yield {_pct(o.final_yield)}   "
        f"retest rate {_pct(o.retest_rate)}   test-level yield {_pct(o.test_yield)}",
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
                        _pct(r.first_pass_yield),
                        _pct(r.final_yield),
                        _pct(r.retest_rate),
                        _pct(r.test_yield),
                        r.basis,
                    ]
                    for r in report.rows
                ],
            ),
        ]
    what = "tests" if args.pareto == "verdict" else "rejects"
    if par.rows:
        lines += [
            "",
            f"Pareto of {args.pareto} ({par.total} {what})",
            table(
                [args.pareto, "n", "share", "cumulative"],
                [[r.category, r.n, _pct(r.share), _pct(r.cumulative_share)] for r in par.rows[:15]],
            ),
        ]
    return Report(
        "yield", f.to_dict(), {"yield": report.to_dict(), "pareto": par.to_dict()}, "\n".join(lines)
    )


def _capability(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import capability, histogram

    f = filters_from(args, get_store=get_store)
    guard = _quantity(args.guard_band, "leak", "sccm", "--guard-band")
    results = _store_results(get_store(), f)
    results = results[results["verdict"].astype(str) != "aborted"]
    keys = ["station", "program"] if args.by_station else ["program"]
    studies, rows, notes = [], [], []
    for key, g in results.sort_values("ended_at").groupby(keys, sort=True):
        key_t = key if isinstance(key, tuple) else (key,)
        label = "/".join(str(k) for k in key_t)
        limit = float(g["reject_limit_sccm"].iloc[-1])
        lower = _latest_lower(g)
        if g["reject_limit_sccm"].nunique() > 1:
            notes.append(
                f"{label}: reject limit changed in the period; using the latest ({limit:g} sccm)"
            )
        values = g["leak_rate_sccm"].to_numpy(dtype=float)
        if len(values) < 2:
            notes.append(f"{label}: only {len(values)} reading(s), skipped")
            continue
        try:
            # the within σ of Cpu from each station's own sequence of readings
            cap = capability(values, limit, lower, guard_band=guard,
                             groups=g["station"].astype(str).to_numpy())
        except ValueError as exc:
            notes.append(f"{label}: {exc}")
            continue
        hist = histogram(
            values,
            method="fixed" if args.bins else "fd",
            bins=args.bins or 30,
            reject_limit=limit,
            lower_limit=lower,
        )
        studies.append(
            {
                "group": dict(zip(keys, map(str, key_t), strict=True)),
                "capability": cap.to_dict(),
                "histogram": hist.to_dict(),
            }
        )
        nn = cap.non_normal
        model_ppm = (cap.ppu.ppm_beyond_limit if cap.recommended == "normal" or nn is None
                     else nn.ppm_above)
        rows.append(
            [
                label,
                cap.n,
                _num(cap.mean),
                _num(cap.std),
                _num(limit),
                f"{_num(cap.ppu.value, '.2f')} "
                f"[{_num(cap.ppu.lower, '.2f')}, {_num(cap.ppu.upper, '.2f')}]",
                _num(cap.cpu.value if cap.cpu else None, ".2f"),
                _num(cap.ppu.ppm_beyond_limit, ".1f"),
                cap.recommended,
                _num(model_ppm, ".1f"),
                _pct(cap.guard_band_share),
            ]
        )
        notes.append(f"{label}: {cap.note}")
    text = table(
        [
            "program" if not args.by_station else "station/program",
            "n",
            "mean",
            "std",
            "limit",
            "Ppu [95 %]",
            "Cpu",
            "ppm (normal)",
            "model",
            "ppm (model)",
            "in guard band",
        ],
        rows,
    )
    if not rows:
        text = "No results with leak readings in the selection."
    text += "".join(f"\n  {n}" for n in notes)
    return Report("capability", f.to_dict(), {"studies": studies, "notes": notes}, text)


def _calibration(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import HealthConfig, calibration_health

    f = filters_from(args, get_store=get_store)
    cfg = HealthConfig(
        min_ratio=args.min_ratio,
        master_loss_limit_pa=_quantity(
            args.master_loss_limit, "pressure", "Pa", "--master-loss-limit"
        ),
        baseline_points=args.baseline,
        ewma_lambda=args.ewma_lambda,
        cusum_k=args.cusum_k,
        cusum_h=args.cusum_h,
    )
    cals = _store_calibrations(get_store(), f)
    if cals.empty:
        return Report(
            "calibration",
            f.to_dict(),
            {"series": [], "alarms": []},
            "No calibration events in the selection.",
        )
    health = calibration_health(cals, cfg)
    rows = []
    for s in health.series:
        p = s.projection
        drift = p.status if p.days_to_limit is None else f"{p.status} in {p.days_to_limit:.1f} d"
        rows.append(
            [
                s.station,
                s.program,
                s.n,
                _num(s.master_loss_pa[-1]),
                _num(s.standard_loss_pa[-1]),
                _num(s.ratio[-1], ".3g"),
                _num(s.sensitivity[-1]),
                sum(not x for x in s.passed),
                _num(p.slope_per_day),
                drift,
            ]
        )
    text = table(
        [
            "station",
            "program",
            "n",
            "master Pa",
            "standard Pa",
            "ratio",
            "sccm/Pa",
            "failed",
            "drift Pa/day",
            "projection",
        ],
        rows,
    )
    if health.alarms:
        text += "\n\nAlarms\n" + table(
            ["at (UTC)", "station", "program", "kind", "message"],
            [
                [
                    a.at.strftime("%Y-%m-%d %H:%M") if a.at else "",
                    a.station,
                    a.program,
                    a.kind,
                    a.message,
                ]
                for a in health.alarms
            ],
        )
    else:
        text += "\n\nNo alarms."
    result = health.to_dict()
    standards = _register(args) if getattr(args, "config", None) else []
    if standards:
        from analytics.standard_use import pressure_mismatch

        mismatches = pressure_mismatch(_store_results(get_store(), f), standards)
        result["standard_pressure"] = [m.to_dict() for m in mismatches]
        text += "".join(f"\n\nLeak standard off its certificate pressure: {m.station}: "
                        f"{m.message}" for m in mismatches)
    return Report("calibration", f.to_dict(), result, text)


def _balanced_from_store(results: pd.DataFrame) -> tuple[pd.DataFrame, str]:
    """Parts tested on every station, each (part, station) cut to the same number of trials."""
    import pandas as pd

    data = results[results["part_id"].notna() & (results["verdict"].astype(str) != "aborted")]
    data = data.sort_values("ended_at")
    stations = sorted(data["station"].unique())
    if len(stations) < 2:
        raise ValueError(
            "gauge R&R from the store needs parts tested on at least 2 stations "
            "(stations act as operators); use --input for other layouts"
        )
    counts = pd.crosstab(data["part_id"], data["station"])
    full = counts[(counts >= 2).all(axis=1)]
    if len(full) < 2:
        raise ValueError(
            "gauge R&R needs at least 2 part ids tested at least twice on every station"
        )
    trials = int(full.to_numpy().min())
    keep = data[data["part_id"].isin(full.index)]
    keep = keep.groupby(["part_id", "station"], sort=False).head(trials)
    tidy = pd.DataFrame(
        {"part": keep["part_id"], "operator": keep["station"], "value": keep["leak_rate_sccm"]}
    )
    note = (
        f"{len(full)} parts × {len(stations)} stations × {trials} trials "
        f"(stations as operators; {len(counts) - len(full)} part ids left out)"
    )
    return tidy, note


def _grr(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import grr_anova, grr_average_range

    tolerance = _quantity(args.tolerance, "leak", "sccm", "--tolerance")
    filters: dict[str, Any] | None
    one_sided = None
    if args.input:
        data = read_tidy_csv(args.input, {"part": str, "operator": str, "value": float})
        source, filters = f"file {args.input}", None
    else:
        f = filters_from(args, get_store=get_store)
        results = _store_results(get_store(), f)
        data, source = _balanced_from_store(results)
        filters = f.to_dict()
        if tolerance is None:
            # a leak test has one real limit, the reject limit (the lower limit is only a
            # plausibility bound): without --tolerance it is taken one-sided
            one_sided = _reject_limit(results)
    reports = [grr_anova(data, tolerance=tolerance, one_sided_limit=one_sided)]
    try:
        reports.append(grr_average_range(data, tolerance=tolerance, one_sided_limit=one_sided))
    except ValueError as exc:
        source += f"; average-and-range skipped: {exc}"
    rows = [
        [
            r.method,
            _num(r.ev),
            _num(r.av),
            _num(r.grr),
            _num(r.pv),
            _num(r.tv),
            f"{r.pct_grr:.2f} %",
            "–" if r.pct_grr_tolerance is None else f"{r.pct_grr_tolerance:.2f} %",
            r.ndc,
            r.verdict,
        ]
        for r in reports
    ]
    text = (
        f"Gauge R&R ({source}): {reports[0].parts} parts, {reports[0].operators} operators, "
        f"{reports[0].trials} trials\n"
    )
    text += table(
        ["method", "EV", "AV", "GRR", "PV", "TV", "%GRR (TV)", "%GRR (tol)", "ndc", "verdict"], rows
    )
    text += "\n\nANOVA\n" + table(
        ["source", "df", "SS", "MS", "F", "p"],
        [
            [a.source, a.df, _num(a.ss), _num(a.ms), _num(a.f), _num(a.p, ".3g")]
            for a in reports[0].anova
        ],
    )
    text += "".join(f"\n  {r.method}: {r.note}" for r in reports)
    if reports[0].tolerance_convention:
        text += f"\n  tolerance: {reports[0].tolerance_convention}"
    for r in reports:
        text += "".join(f"\n  range check: {flag}" for flag in r.range_flags)
    result = {
        "source": source,
        "anova": reports[0].to_dict(),
        "average_range": reports[1].to_dict() if len(reports) > 1 else None,
    }
    return Report("grr", filters, result, text)


def _type1(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import type1_study

    reference = _quantity(args.reference, "leak", "sccm", "--reference")
    tolerance = _quantity(args.tolerance, "leak", "sccm", "--tolerance")
    filters: dict[str, Any] | None = None
    if args.input:
        if reference is None or tolerance is None:
            raise ValueError("type1 --input needs --reference and --tolerance")
        values = read_tidy_csv(args.input, {"value": float})["value"].to_numpy()
        source = f"file {args.input}"
    else:
        if not args.part:
            raise ValueError("type1 from the store needs --part (the reference part's id)")
        f = filters_from(args, get_store=get_store)
        results = _store_results(get_store(), f, part_id=args.part)
        results = results[results["verdict"].astype(str) != "aborted"]
        if results.empty:
            raise ValueError(f"no results for part {args.part!r} in the selection")
        values = results["leak_rate_sccm"].to_numpy(dtype=float)
        reference = 0.0 if reference is None else reference
        convention = ""
        if tolerance is None:
            # one-sided: the reject limit is the only real limit, so the tolerance is twice
            # the distance from the reference to it (the lower limit is a plausibility bound)
            tolerance = 2.0 * (_reject_limit(results) - reference)
            convention = ("one-sided: tolerance = 2 × (reject limit − reference); Cg and Cgk "
                          "then judge the gauge against the one limit that exists")
            if tolerance <= 0:
                raise ValueError("the reference part reads at or above the reject limit: "
                                 "give --tolerance")
        source, filters = f"part {args.part} from the store", f.to_dict()
        if convention:
            source += f"; {convention}"
    r = type1_study(values, reference, tolerance)
    text = table(
        ["n", "mean", "std", "reference", "bias", "bias p", "tolerance", "Cg", "Cgk", "capable"],
        [
            [
                r.n,
                _num(r.mean),
                _num(r.std),
                _num(r.reference),
                _num(r.bias),
                _num(r.bias_p, ".3g"),
                _num(r.tolerance),
                f"{r.cg:.2f}",
                f"{r.cgk:.2f}",
                "yes" if r.capable else "no",
            ]
        ],
    )
    text = f"Type 1 study ({source})\n{text}\n  {r.note}"
    return Report("type1", filters, {"source": source, **r.to_dict()}, text)


def _advise_times(args: argparse.Namespace, test_s: float | None, sensitivity: float | None,
                  reject: float | None, lower: float | None) -> Report:
    """advise --input with columns test_s,loss: master tests at several test times."""
    from analytics.advice_fit import advise_from_times

    if test_s is None or sensitivity is None or reject is None:
        raise ValueError("advise --input with test_s needs --test-time (of the calibration), "
                         "--sensitivity and --reject-limit")
    data = read_tidy_csv(args.input, {"test_s": float, "loss": float})
    groups: dict[float, list[float]] = {}
    for t, loss in zip(data["test_s"].tolist(), data["loss"].tolist(), strict=True):
        groups.setdefault(float(t), []).append(float(loss))
    tolerance = reject - lower if lower is not None else 2.0 * reject  # one-sided: 2·limit
    pressure = _quantity(args.test_pressure, "pressure", "Pa", "--test-pressure")
    a = advise_from_times(groups, test_s, sensitivity, tolerance, target_pct=args.target,
                          reject_limit_sccm=reject, test_pressure_pa=pressure)
    rows = [[f"{t:g}", _num(sig), n] for t, sig, n in zip(a.fit.times_s, a.fit.sigma_pa,
                                                          a.fit.n, strict=True)]
    text = (f"Test-time advice from master tests at {len(a.fit.times_s)} test times "
            f"(file {args.input})\n" + table(["test s", "σ loss Pa", "n"], rows)
            + f"\n  fit: {a.fit.model}; a = {a.fit.params['a']:.3g} Pa², "
            f"b = {a.fit.params['b']:.3g} Pa²/s, c = {a.fit.params['c']:.3g} Pa²/s²"
            + f"\n  {a.message}" + "".join(f"\n  assumes: {x}" for x in a.assumptions))
    return Report("advise", None, {"source": f"file {args.input}", **a.to_dict()}, text)


def _advise(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import advise_test_time

    test_s = _quantity(args.test_time, "time", "s", "--test-time")
    reject = _quantity(args.reject_limit, "leak", "sccm", "--reject-limit")
    lower = _quantity(args.lower_limit, "leak", "sccm", "--lower-limit")
    max_s = _quantity(args.max_test_time, "time", "s", "--max-test-time")
    sensitivity = args.sensitivity
    filters: dict[str, Any] | None = None
    if args.input:
        import csv as _csv

        with open(args.input, newline="", encoding="utf-8") as fh:
            header = next(_csv.reader(fh), [])
        if "test_s" in header:  # master tests at several test times: the growth is measured
            return _advise_times(args, test_s, sensitivity, reject, lower)
        losses = read_tidy_csv(args.input, {"loss": float})["loss"].to_numpy()
        if test_s is None or sensitivity is None or reject is None:
            raise ValueError("advise --input needs --test-time, --sensitivity and --reject-limit")
        source = f"file {args.input}"
        sigma_method: Literal["std", "moving-range"] = "std"
    else:
        # Calibrations are days apart: the moving range keeps slow drift out of the noise.
        sigma_method = "moving-range"
        f = filters_from(args, get_store=get_store)
        store = get_store()
        cals = _store_calibrations(store, f)
        cals = cals[cals["passed"].astype(bool)] if not cals.empty else cals
        pairs = sorted(
            {(str(s), str(p)) for s, p in zip(cals["station"], cals["program"], strict=True)}
        )
        if not pairs:
            raise ValueError("no passed calibrations in the selection")
        if len(pairs) > 1:
            raise ValueError(
                "advise works on one station and program; choose with --station and "
                f"--program from: {', '.join('/'.join(p) for p in pairs)}"
            )
        station, program = pairs[0]
        cals = cals.sort_values("ended_at")
        losses = cals["master_loss_pa"].to_numpy(dtype=float)
        sensitivity = (
            sensitivity if sensitivity is not None else float(cals["sensitivity"].iloc[-1])
        )
        results = _store_results(store, Filters(f.since, f.until, station, None, program))
        if test_s is None or reject is None:
            if results.empty:
                raise ValueError(
                    f"no results for {station}/{program}: give --test-time and --reject-limit"
                )
            latest = results.sort_values("ended_at").iloc[-1]
            test_s = float(latest["test_s"]) if test_s is None else test_s
            reject = float(latest["reject_limit_sccm"]) if reject is None else reject
            if lower is None and args.reject_limit is None:
                lower = _latest_lower(results.sort_values("ended_at"))
        source = f"{len(losses)} calibrations of {station}/{program} (master-part losses)"
        filters = f.to_dict()
    a = advise_test_time(
        losses,
        test_s,
        sensitivity,
        reject,
        lower,
        target_pct=args.target,
        sqrt_fraction=args.sqrt_fraction,
        max_test_s=max_s,
        sigma_method=sigma_method,
    )
    step = max(1, len(a.curve) // 12)
    shown = a.curve[::step]
    text = (
        f"Test-time advice ({source})\n"
        f"  now: test {a.current_test_s:g} s, σ(loss) {a.sigma_loss_pa:.3g} Pa ({a.sigma_method}), "
        "sensitivity "
        f"{a.sensitivity:.4g} sccm/Pa, tolerance {a.tolerance_sccm:g} sccm "
        f"→ %GRR {a.current_pct_grr:.1f} %\n"
        f"  shortest test time for ≤ {a.target_pct:g} %: "
        f"{_num(a.recommended_test_s, '.1f')} s (conservative, σ upper 95 %: "
        f"{_num(a.conservative_test_s, '.1f')} s)\n\n"
        + table(
            ["test s", "σ loss Pa", "sccm/Pa", "σ leak sccm", "%GRR"],
            [
                [
                    f"{p.test_s:.2f}",
                    _num(p.sigma_loss_pa, ".3g"),
                    _num(p.sensitivity),
                    _num(p.sigma_leak_sccm, ".3g"),
                    f"{p.pct_grr:.1f}",
                ]
                for p in shown
            ],
        )
        + f"\n  assumes: {a.assumptions}"
        + (f"\n  {a.note}" if a.note else "")
    )
    return Report("advise", filters, {"source": source, **a.to_dict()}, text)


def _latest_lower(results: pd.DataFrame) -> float | None:
    """The latest lower limit in ``results`` (sorted by time), if any result has one."""
    if "lower_limit_sccm" not in results.columns:
        return None
    lower = results["lower_limit_sccm"].dropna()
    return float(lower.iloc[-1]) if len(lower) else None


def _reject_limit(results: pd.DataFrame) -> float:
    """The reject limit of the latest result."""
    return float(results.sort_values("ended_at")["reject_limit_sccm"].iloc[-1])


def _master(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
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
        frames = [_store_results(get_store(), f, part_id=p) for p in ids]
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
                    _num(c.mean),
                    _num(c.std),
                    _num(c.min),
                    _num(c.max),
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


def _part(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import part_history

    f = filters_from(args, get_store=get_store)
    store = get_store()
    results = _store_results(store, f, part_id=args.part_id)
    cals = _store_calibrations(store, Filters(f.since, f.until)) if not results.empty else None
    h = part_history(results, cals, args.part_id)
    if not h.tests:
        text = f"Part {args.part_id}: no tests in the selection."
    else:
        text = (
            f"Part {args.part_id}: {h.note}; final verdict {h.final_verdict}"
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
                        _num(t.leak_rate_sccm),
                        _num(t.reject_limit_sccm),
                        t.calibration_at.strftime("%Y-%m-%d %H:%M") if t.calibration_at else "none",
                        _num(t.master_loss_pa),
                        _num(t.standard_loss_pa),
                    ]
                    for t in h.tests
                ],
            )
        )
    return Report("part", f.to_dict(), h.to_dict(), text)


def _retests(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from analytics import retest_analysis

    f = filters_from(args, get_store=get_store)
    by = tuple(b.strip() for b in args.by.split(",") if b.strip())
    for key in by:
        if key not in ("station", "program", "line", "shift", "day"):
            raise ValueError(f"--by: cannot group retests by {key!r}")
    calendar = _calendar(args)
    guard = _quantity(args.guard_band, "leak", "sccm", "--guard-band")
    results = _store_results(get_store(), f)
    r = retest_analysis(
        results, by=by, calendar=calendar, guard_band=guard, alarm_period=args.alarm_period
    )
    lines = [
        f"Retests: {r.parts} parts with ids, {r.passed_parts} passed, {r.passed_after_retest} "
        f"of them only on a retest ({_pct(r.share_of_passes_after_retest)} of passes); {r.note}",
        "Passed only after ≥ 2 rejects: "
        + (", ".join(r.passed_after_two_or_more_rejects) or "none"),
    ]
    if r.by_group:
        lines += [
            "",
            table(
                [*by, "passes", "after retest", "share"],
                [
                    [*(g[k] for k in by), g["passes"], g["passed_after_retest"], _pct(g["share"])]
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
                        _num(m["leak_rate_sccm"]),
                        _num(m["reject_limit_sccm"]),
                        m["rejects_before"],
                    ]
                    for m in r.marginal_passes
                ],
            ),
        ]
    lines += ["", "Alarms: " + ("none" if not r.alarms else "")]
    lines += [f"  {a.message}" for a in r.alarms]
    return Report("retests", f.to_dict(), r.to_dict(), "\n".join(lines))


def _read_standards(path: str) -> list[Any]:
    """The leak-standard register from CSV; errors name the line and column."""
    from analytics import LeakStandard

    frame = read_tidy_csv(
        path,
        {
            "serial": str,
            "station": str,
            "nominal_sccm": float,
            "reference_pressure_pa": float,
            "certificate_date": str,
        },
    )
    with Path(path).open(newline="", encoding="utf-8-sig") as handle:
        extra = list(csv.DictReader(handle))
    out = []
    for i, (row, raw) in enumerate(zip(frame.to_dict("records"), extra, strict=True), start=2):
        raw = {k.strip().lower(): (v or "").strip() for k, v in raw.items() if k}

        def day(col: str, text: str, line: int = i) -> date:
            try:
                return date.fromisoformat(text)
            except ValueError:
                raise ValueError(
                    f"{path}:{line}: column {col!r}: expected a date YYYY-MM-DD, got {text!r}"
                ) from None

        due = raw.get("due_date", "")
        months = raw.get("interval_months", "")
        if not due and not months:
            raise ValueError(f"{path}:{i}: give column 'due_date' or 'interval_months'")
        try:
            interval = int(months) if months else None
            uncertainty = float(raw["uncertainty_pct"]) if raw.get("uncertainty_pct") else None
        except ValueError:
            raise ValueError(
                f"{path}:{i}: interval_months must be a whole number and uncertainty_pct a number"
            ) from None
        out.append(
            LeakStandard(
                serial=row["serial"],
                station=row["station"],
                nominal_sccm=row["nominal_sccm"],
                reference_pressure_pa=row["reference_pressure_pa"],
                certificate_date=day("certificate_date", row["certificate_date"]),
                due_date=day("due_date", due) if due else None,
                interval_months=interval,
                uncertainty_pct=uncertainty,
            )
        )
    return out


def _standards(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    from zoneinfo import ZoneInfo

    from analytics import flag_overdue_calibrations, standard_drift, standards_due

    standards = _register(args)
    if not standards and not args.standards:
        raise ValueError(
            "standards: give --standards FILE.csv or a --config with a [[standards]] register"
        )
    timezone = _timezone(args)
    today = (
        date.fromisoformat(args.today)
        if args.today
        else datetime.now(UTC).astimezone(ZoneInfo(timezone)).date()
    )
    status = standards_due(standards, today, args.within)
    text = f"Leak standards on {today.isoformat()} (due within {args.within} days)\n" + table(
        ["serial", "station", "nominal sccm", "due", "days left", "status"],
        [
            [
                s.serial,
                s.station,
                _num(s.nominal_sccm),
                s.due_date.isoformat(),
                s.days_left,
                s.status,
            ]
            for s in status
        ],
    )
    result: dict[str, Any] = {
        "today": today.isoformat(),
        "standards": [s.to_dict() for s in status],
    }
    filters = None
    if not args.no_store:
        f = filters_from(args, get_store=get_store)
        filters = f.to_dict()
        cals = _store_calibrations(get_store(), f)
        overdue_runs: list[dict[str, Any]] = []
        drift: list[dict[str, Any]] = []
        if not cals.empty:
            flagged = flag_overdue_calibrations(cals, standards, timezone)
            bad = flagged[flagged["standard_overdue"]]
            overdue_runs = [
                {
                    "station": str(r["station"]),
                    "program": str(r["program"]),
                    "ended_at": pd_iso(r["ended_at"]),
                    "standard": r["standard_serial"],
                }
                for r in bad.to_dict("records")
            ]
            for s in standards:
                d = standard_drift(cals, s)
                drift.append({"serial": s.serial, "station": s.station, **d.to_dict()})
        from analytics.standard_use import pressure_mismatch

        mismatches = pressure_mismatch(_store_results(get_store(), f), standards)
        result |= {"pressure_mismatch": [m.to_dict() for m in mismatches]}
        if mismatches:
            text += "\n\nStandards used off their certificate pressure:"
            text += "".join(f"\n  {m.station}  {m.message}" for m in mismatches)
        result |= {"overdue_calibrations": overdue_runs, "sensitivity_drift": drift}
        text += f"\n\nCalibrations run with an overdue standard: {len(overdue_runs)}"
        text += "".join(
            f"\n  {o['ended_at'][:16]}  {o['station']}  {o['program']}  {o['standard']}"
            for o in overdue_runs[:20]
        )
        if drift:
            text += "\n\nMeasured sensitivity per standard since its certificate\n" + table(
                ["serial", "station", "n", "slope per day", "status"],
                [
                    [d["serial"], d["station"], d["n"], _num(d["slope_per_day"]), d["status"]]
                    for d in drift
                ],
            )
    return Report("standards", filters, result, text)


def _shift_handler(args: argparse.Namespace) -> int:
    """Build the shift report; write the HTML page when asked, print JSON or text."""
    from gateway.reports import render_shift_html

    report = build_report("shift", args)
    document = report.document()
    if args.html:
        page = render_shift_html(document, paper=args.paper)
        try:
            Path(args.html).write_text(page, encoding="utf-8")
        except OSError as exc:
            raise ValueError(f"--html {args.html}: cannot write ({exc.strerror})") from None
        print(f"wrote {args.html}", file=sys.stderr)
    if not report.result["has_data"]:
        print(f"leakfleet report shift: note: {report.result['note']}", file=sys.stderr)
    print(json.dumps(document, allow_nan=False, indent=2) if args.json else report.text)
    return 0


def _shift_date(text: str, timezone: str) -> date:
    from zoneinfo import ZoneInfo

    today = datetime.now(UTC).astimezone(ZoneInfo(timezone)).date()
    word = text.strip().lower()
    if word in ("today", "yesterday"):
        return today - timedelta(days=1 if word == "yesterday" else 0)
    try:
        return date.fromisoformat(text.strip())
    except ValueError:
        raise ValueError(
            f"--date: expected a date YYYY-MM-DD (or today, yesterday), got {text!r}"
        ) from None


def _shift(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    import pandas as pd

    from analytics import HealthConfig, shift_report

    calendar = _calendar(args)
    day = _shift_date(args.date, calendar.timezone)
    if args.shift not in calendar.names:
        raise ValueError(
            f"--shift: unknown shift {args.shift!r}; the calendar has {', '.join(calendar.names)}"
        )
    if not (0 <= args.history <= 366):
        raise ValueError(f"--history: expected 0..366 days, got {args.history:g}")
    if args.within < 0:
        raise ValueError(f"--within: expected days ≥ 0, got {args.within}")
    window = calendar.window(day, args.shift)
    standards = _register(args)
    health = HealthConfig(
        min_ratio=args.min_ratio,
        master_loss_limit_pa=_quantity(
            args.master_loss_limit, "pressure", "Pa", "--master-loss-limit"
        ),
    )
    since = window.start - timedelta(days=args.history)
    store = get_store()
    results = store.results(since, window.end, line=args.line)
    cals = store.calibrations(window.end - timedelta(days=args.history), window.end,
                              line=args.line)  # fmt: skip
    stations = store.stations() if hasattr(store, "stations") else None
    plant = _plant(args)
    if plant is not None:  # stations the plant has, whether or not they have reported yet
        known = pd.DataFrame(
            [(st.id, st.line) for st in plant.stations], columns=["station", "line"]
        )
        if stations is not None and len(stations):
            known = known[~known["station"].isin(stations["station"].astype(str))]
            stations = pd.concat([stations[["station", "line"]], known], ignore_index=True)
        else:
            stations = known
    if stations is not None and args.line is not None:
        stations = stations[stations["line"].astype("string") == args.line]
    statuses = None
    if hasattr(store, "statuses"):
        names = set(stations["station"].astype(str)) if stations is not None else set()
        names |= set(results["station"].astype(str)) if len(results) else set()
        frames = [store.statuses(window.start, window.end)]
        frames += [
            store.statuses(None, window.start, station=n, limit=1, newest_first=True)
            for n in sorted(names)
        ]
        frames = [f for f in frames if len(f)]
        statuses = pd.concat(frames, ignore_index=True) if frames else None
    r = shift_report(
        window, calendar, results, cals, statuses, stations, standards,
        history_since=since, within_days=args.within,
        guard_band=_quantity(args.guard_band, "leak", "sccm", "--guard-band"),
        health=health, line=args.line,
    )  # fmt: skip
    result = r.to_dict()
    filters = {
        "date": day.isoformat(),
        "shift": args.shift,
        "line": args.line,
        "since": window.start.isoformat(),
        "until": window.end.isoformat(),
        "config": None if plant is None else plant.source,
    }
    return Report("shift", filters, result, _shift_text(result, calendar))


def _shift_text(r: dict[str, Any], calendar: Any) -> str:
    """The shift report as plain text (the table view of the same document)."""
    start = datetime.fromisoformat(r["start"]).astimezone(calendar.tz)
    end = datetime.fromisoformat(r["end"]).astimezone(calendar.tz)
    lines = [
        f"Shift {r['shift_date']} {r['shift']}: {start:%Y-%m-%d %H:%M} – {end:%Y-%m-%d %H:%M} "
        f"({r['timezone']}), {r['tests']} tests"
    ]
    if not r["has_data"]:
        lines.append(f"  {r['note']}")
    for sec in r["lines"]:
        rt = sec["retests"]
        lines += [
            "",
            f"Line {sec['line']}: {sec['tests']} tests, {sec['parts']} parts; first-pass yield "
            f"{_pct(sec['first_pass_yield'])}, final yield {_pct(sec['final_yield'])}; "
            f"{rt['passed_after_retest']} of {rt['passes']} passes needed a retest "
            f"({_pct(rt['share'])})" + (f"; {sec['note']}" if sec["note"] else ""),
        ]
        if sec["rejects"]["rows"]:
            lines.append(
                "  rejects: "
                + ", ".join(f"{x['category']} {x['n']}" for x in sec["rejects"]["rows"][:8])
            )
        for s in sec["stations"]:
            lines.append(
                f"  {s['station']}: {s['tests']} tests, calibration {s['calibration_state']}"
                + (f" (last {s['last_calibration_at'][:16]})" if s["last_calibration_at"] else "")
                + (f", standard {s['standard_serial']}" if s["standard_serial"] else "")
            )
        lines += [f"  alarm {a['station']}: {a['message']}" for a in sec["alarms"]]
        lines += [
            f"  standard {x['serial']} ({x['station']}) due {x['due_date']}: {x['status']}"
            for x in sec["standards"]
            if x["status"] != "ok"
        ]
    return "\n".join(lines)


def pd_iso(value: Any) -> str:
    """ISO 8601 text of a pandas/py datetime."""
    return str(value.isoformat()) if hasattr(value, "isoformat") else str(value)


if __name__ == "__main__":  # pragma: no cover
    from gateway.cli import main

    sys.exit(main(["report", *sys.argv[1:]]))
