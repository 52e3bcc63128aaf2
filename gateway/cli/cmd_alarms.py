"""``leakfleet alarms``: the fleet's alarm list as the journal keeps it; acknowledge; evaluate."""

from __future__ import annotations

import argparse
import json
import os
from collections.abc import Sequence
from typing import Any

ORDER = 44


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "alarms",
        help="list, acknowledge or evaluate the fleet's alarms",
        description=(
            "The gateway evaluates the alarm rules (calibration failed, overdue or drifting "
            "within its epoch; reject streak or rate; station offline or silent; garbage on "
            "the line; sink backlog) every 30 s and keeps each alarm's state in the journal: "
            "active, acknowledged (by whom, when), cleared. The dashboard shows the same list."
        ),
        epilog=(
            "examples:\n"
            "  leakfleet alarms list\n"
            "  leakfleet alarms ack 12 --by 'J. Doe'\n"
            "  leakfleet alarms evaluate     # once, e.g. on a journal without a gateway\n\n"
            "LEAKFLEET_CLOCK=data judges 'now' as the newest result's receipt when that is later\n"
            "than the wall clock (a simulated plant running faster than real time)."
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--store", metavar="URL",
                        help="journal (default: the config's store, else "
                        "sqlite:///./leakfleet.db)")
    parser.add_argument("--config", metavar="FILE|demo",
                        help="gateway config: its [alarms] thresholds, leak-standard register "
                        "([[standards]]: due for recertification) and time zone")
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="list|ack|evaluate")
    ls = verbs.add_parser("list", help="open alarms (with --all, cleared ones too)")
    ls.add_argument("--all", action="store_true", help="include cleared alarms")
    ls.add_argument("--json", action="store_true", help="JSON lines")
    ls.set_defaults(func=_list)
    ack = verbs.add_parser("ack", help="acknowledge an open alarm")
    ack.add_argument("id", type=int, help="alarm number (from 'alarms list')")
    ack.add_argument("--by", required=True, help="who acknowledges")
    ack.set_defaults(func=_ack)
    ev = verbs.add_parser("evaluate", help="run the rules once and update the states")
    ev.set_defaults(func=_evaluate)
    watch = verbs.add_parser(
        "watch", help="run the rules every --interval seconds until stopped (the gateway "
        "starts this itself, as its own process)")
    watch.add_argument("--interval", type=float, default=30.0, metavar="S",
                       help="seconds between evaluations (default 30)")
    watch.add_argument("--sinks", default="", metavar="A,B",
                       help="sinks whose backlog the rules watch")
    watch.set_defaults(func=_watch)


class _Plant:
    """What the rules read from the gateway config (defaults without one)."""

    def __init__(self, args: argparse.Namespace) -> None:
        from analytics.alarms import AlarmRules

        self.rules = AlarmRules()
        self.standards: list[Any] = []
        self.timezone = "UTC"
        store = None
        if args.config:
            from gateway.alarm_eval import rules_from
            from gateway.config import load_config
            from gateway.reports.inputs import config_standard

            cfg = load_config(args.config)
            self.rules = rules_from(cfg.alarms)
            self.standards = [config_standard(cfg.source, i, t)
                              for i, t in enumerate(cfg.standards)]
            self.timezone = cfg.timezone
            store = cfg.store
        args.store = args.store or store or "sqlite:///./leakfleet.db"

    def evaluate(self, journal: Any, store: Any, sinks: Sequence[str] = ()) -> int:
        from gateway.alarm_eval import clock_now, evaluate

        return evaluate(journal, store, clock_now(store, os.environ), self.rules, sinks,
                        self.standards, self.timezone)


def _open(url: str) -> tuple[Any, Any]:
    from gateway.store import open_journal
    from gateway.store.logbook import Logbook

    journal = open_journal(url)
    return journal, Logbook(journal)


def _list(args: argparse.Namespace) -> int:
    _Plant(args)
    journal, book = _open(args.store)
    try:
        rows = book.alarms() if args.all else book.open_alarms()
    finally:
        journal.close()
    for a in rows:
        if args.json:
            print(json.dumps({"id": a.id, "key": a.key, "rule": a.rule, "station": a.station,
                              "severity": a.severity, "state": a.state, "message": a.message,
                              "since": a.since.isoformat(), "acked_by": a.acked_by}))
        else:
            who = f" (ack {a.acked_by})" if a.acked_by else ""
            print(f"#{a.id:<5} {a.severity.upper():8} {a.state:12} {a.station or '-':10} "
                  f"{a.message}{who}")
    if not rows and not args.json:
        print("no open alarms" if not args.all else "no alarms recorded")
    return 0


def _ack(args: argparse.Namespace) -> int:
    _Plant(args)
    journal, book = _open(args.store)
    try:
        done = book.acknowledge(args.id, args.by)
    finally:
        journal.close()
    if not done:
        raise ValueError(f"alarm #{args.id} is not open and unacknowledged "
                         "(see 'leakfleet alarms list --all')")
    print(f"alarm #{args.id} acknowledged by {args.by}")
    return 0


def _evaluate(args: argparse.Namespace) -> int:
    from gateway.store import open_store

    plant = _Plant(args)
    journal, _ = _open(args.store)
    store = open_store(args.store)
    try:
        n = plant.evaluate(journal, store)
    finally:
        journal.close()
        store.close()
    print(f"{n} alarm(s) raised or cleared")
    return 0


def _watch(args: argparse.Namespace) -> int:
    """Evaluate until SIGTERM/SIGINT. Its own process, so the statistics libraries the rules
    need never weigh on the gateway's memory; a failed round is reported and retried."""
    import signal
    import sys
    import time

    from gateway.errors import LeakfleetError
    from gateway.store import open_journal, open_store

    if not 1.0 <= args.interval <= 86400:
        raise ValueError(f"--interval: expected 1..86400 s, got {args.interval:g}")
    sinks = [s for s in args.sinks.split(",") if s]
    plant = _Plant(args)
    stopping = False

    def stop(signum: int, frame: object) -> None:
        nonlocal stopping
        stopping = True

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    while not stopping:
        try:
            store = open_store(args.store)
            try:
                with open_journal(args.store) as journal:
                    n = plant.evaluate(journal, store, sinks)
            finally:
                store.close()
            if n:
                print(f"alarm rules: {n} alarm(s) raised or cleared", file=sys.stderr,
                      flush=True)
        except (LeakfleetError, ValueError, KeyError, OSError) as exc:
            print(f"alarm rules: evaluation failed, will retry: {exc}", file=sys.stderr,
                  flush=True)
        end = time.monotonic() + args.interval
        while not stopping and time.monotonic() < end:
            time.sleep(0.2)
    return 0
