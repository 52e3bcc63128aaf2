"""One entry point for every report kind: (options, store) -> Report.

``options`` is any object with the report's option attributes (the CLI passes its parsed
arguments; the dashboard a ``types.SimpleNamespace``); ``store`` any object with the QueryStore
methods, else the store named by the options is opened and closed here.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import Any

from gateway.reports import (
    advice,
    calibration,
    capability,
    gauge,
    master,
    part,
    retests,
    shift,
    yields,
)
from gateway.reports import standards as standards_report
from gateway.reports.common import Report, known_ids, open_store_url
from gateway.reports.settings import store_url

Builder = Callable[[argparse.Namespace, Callable[[], Any]], Report]

BUILDERS: dict[str, Builder] = {
    "yield": yields.build,
    "capability": capability.build,
    "calibration": calibration.build,
    "grr": gauge.build_grr,
    "type1": gauge.build_type1,
    "advise": advice.build,
    "master": master.build,
    "part": part.build,
    "retests": retests.build,
    "standards": standards_report.build,
    "shift": shift.build,
}


def build_report(kind: str, args: argparse.Namespace, store: Any | None = None) -> Report:
    """Compute one report; ``store`` (any object with the QueryStore methods) or --store URL."""
    opened: list[Any] = []

    def get_store() -> Any:
        if store is not None:
            return known_ids(store, args)
        if not opened:
            opened.append(known_ids(open_store_url(store_url(args)), args))
        return opened[0]

    try:
        return BUILDERS[kind](args, get_store)
    finally:
        for s in opened:
            close = getattr(s, "close", None)
            if callable(close):
                close()
