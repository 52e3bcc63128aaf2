"""``leakfleet dead-letters``: the records a sink's server refused, and why."""

from __future__ import annotations

import argparse
import json

ORDER = 46


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "dead-letters",
        help="list records a sink's server refused (parked so the sink could go on)",
        description=(
            "A record a sink's server will never take (a timestamp outside InfluxDB's range, "
            "a payload over the broker's limit) is isolated, parked here with the server's "
            "reason, and the sink goes on with the next. The record itself stays in the "
            "journal (export it with 'leakfleet export'); fix the cause, then send it by hand "
            "or leave it recorded."
        ),
    )
    parser.add_argument("--store", default="sqlite:///./leakfleet.db", metavar="URL",
                        help="journal (default sqlite:///./leakfleet.db)")
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="list")
    ls = verbs.add_parser("list", help="parked records, oldest first")
    ls.add_argument("--sink", help="one sink only")
    ls.add_argument("--json", action="store_true", help="JSON lines, with each record")
    ls.set_defaults(func=_list)


def _list(args: argparse.Namespace) -> int:
    from gateway.store import open_journal
    from gateway.store.deadletters import dead_letters

    with open_journal(args.store) as journal:
        rows = dead_letters(journal, args.sink)
    for r in rows:
        if args.json:
            print(json.dumps({**r, "at": r["at"].isoformat()}))
        else:
            print(f"{r['at']:%Y-%m-%d %H:%M:%S}  {r['sink']:<10} {r['kind']:<12} "
                  f"{r['station']:<10} {r['record_id']}  {r['reason']}")
    if not rows and not args.json:
        print("no dead letters")
    return 0
