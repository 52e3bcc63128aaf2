"""``leakfleet maintenance``: write down what was done to a station, and list it."""

from __future__ import annotations

import argparse
import json
from datetime import UTC, datetime
from typing import Any

ORDER = 45


def _time(text: str) -> datetime:
    try:
        value = datetime.fromisoformat(text.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected an ISO 8601 time (2026-12-03T14:05, naive means UTC), got {text!r}"
        ) from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    from gateway.records import MAINTENANCE_KINDS

    parser = sub.add_parser(
        "maintenance",
        help="record a seal change, new fixture or leak standard, or a note; list them",
        description=(
            "Maintenance events go into the journal. A seal change, new fixture, new leak "
            "standard, repair or baseline reset restarts the station's calibration baselines "
            "(its drift charts and alarms judge the new state against itself, not against "
            "the worn seal); a note only annotates the charts. Stop and lock out a station "
            "as your site's procedures require before working on it."
        ),
        epilog=(
            "examples:\n"
            "  leakfleet maintenance add L1-S2 --kind 'seal change' --by 'J. Doe' "
            "--note 'fixture seal, 4000 cycles'\n"
            "  leakfleet maintenance list --station L1-S2"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--store", default="sqlite:///./leakfleet.db", metavar="URL",
                        help="journal (default sqlite:///./leakfleet.db)")
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="add|list")
    add = verbs.add_parser("add", help="record one event")
    add.add_argument("station", help="station id")
    add.add_argument("--kind", required=True, choices=MAINTENANCE_KINDS, help="what was done")
    add.add_argument("--at", type=_time, help="when it was done (default now)")
    add.add_argument("--note", default="", help="free text, one line")
    add.add_argument("--by", default="", help="who did it")
    add.set_defaults(func=_add)
    ls = verbs.add_parser("list", help="list events, oldest first")
    ls.add_argument("--station", help="one station only")
    ls.add_argument("--json", action="store_true", help="JSON lines")
    ls.set_defaults(func=_list)


def _book(url: str) -> Any:
    from gateway.store import open_journal
    from gateway.store.logbook import Logbook

    journal = open_journal(url)
    return journal, Logbook(journal)


def _add(args: argparse.Namespace) -> int:
    from gateway.records import MaintenanceEvent

    event = MaintenanceEvent(args.station, args.at or datetime.now(UTC), args.kind,
                             args.note, args.by)
    journal, book = _book(args.store)
    try:
        stations = {str(row[0]) for row in journal._query(
            "SELECT DISTINCT station FROM results UNION SELECT station FROM statuses", (),
            "reading the stations")}
        if stations and args.station not in stations:
            raise ValueError(f"no station {args.station!r} in this journal "
                             f"(stations: {', '.join(sorted(stations))})")
        new = book.add_maintenance(event)
    finally:
        journal.close()
    print(f"{'recorded' if new else 'already recorded'}: {event.station} {event.what} at "
          f"{event.at.isoformat(timespec='seconds')}")
    return 0


def _list(args: argparse.Namespace) -> int:
    journal, book = _book(args.store)
    try:
        events = book.maintenance(args.station)
    finally:
        journal.close()
    for e in events:
        if args.json:
            print(json.dumps(e.to_dict()))
        else:
            by = f" by {e.by}" if e.by else ""
            note = f": {e.note}" if e.note else ""
            print(f"{e.at.isoformat(timespec='minutes')}  {e.station}  {e.what}{by}{note}")
    if not events and not args.json:
        print("no maintenance recorded")
    return 0
