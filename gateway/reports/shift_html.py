"""The shift report as one self-contained, printable HTML file.

Input is the ``leakfleet report shift --json`` document; output is a single HTML string with
its CSS inline (the Pareto's bars are CSS too): no scripts, no fonts, no images, no links, so the
file opens the same on a shop-floor PC without network and in an auditor's archive years later.
Print CSS sets the page (A4 or Letter), one line per page: each line's section is one printed
page with the site and "Line X — page n of N" (counted here: Chromium prints ``@page`` margin
boxes with their page counters, the bottom's "sheet n of N", but cannot put the line's name in
one), its comparison with the previous shift and the target, its tables cut to
what fits (with how many rows were left out) and a sign-off and comments block.

Pressures and leak rates are printed in the document's ``units`` (``{"pressure": "kPa",
"leak": "mbar*L/s"}``, default Pa and sccm), converted by ``gateway.units``; ``data-value``
keeps the canonical value.

Every figure printed from the document carries ``data-path`` (its place in the document's
``result``, e.g. ``lines/0/first_pass_yield``) and ``data-value`` (the JSON value), so a reader
or a test can check the page against the JSON without parsing formatted text.

The page is the jinja2 template ``templates/shift.html.j2`` (autoescape on: every value from
the document is escaped); this module only decides how many rows of each table fit the
page, and renders.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from functools import cache
from typing import Any, Literal
from zoneinfo import ZoneInfo

import jinja2

from gateway.units import from_canonical, unit_label

__all__ = ["PAPER_SIZES", "render_shift_html"]

Paper = Literal["a4", "letter"]
PAPER_SIZES: dict[str, str] = {"a4": "A4", "letter": "letter"}

_COLOURS = {
    "good": "#2e7d32",
    "reject": "#c62828",
    "retest": "#ef6c00",
    "ink": "#1f2933",
    "muted": "#6b7785",
    "grid": "#d5dbe1",
}


def _json(value: Any) -> str:
    return json.dumps(value, allow_nan=False)


def _pct(value: Any) -> str:
    return "–" if value is None else f"{100 * float(value):.1f} %"


def _points(value: Any) -> str:
    """A difference of two shares in percentage points, signed."""
    return "–" if value is None else f"{100 * float(value):+.1f} pp"


def _signed(value: Any) -> str:
    return "–" if value is None else f"{float(value):+.0f}"




@dataclass(frozen=True)
class _Units:
    """The page's display units and their labels."""

    pressure: str = "Pa"
    leak: str = "sccm"

    @property
    def p_label(self) -> str:
        return unit_label(self.pressure)

    @property
    def q_label(self) -> str:
        return unit_label(self.leak)

    def shown(self, value: Any, kind: Literal["pressure", "leak"]) -> str:
        if value is None:
            return "–"
        unit = self.pressure if kind == "pressure" else self.leak
        return _num(from_canonical(float(value), unit, kind))


def _num(value: Any, fmt: str = ".4g") -> str:
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    return format(float(value), fmt)


@cache
def _environment() -> jinja2.Environment:
    env = jinja2.Environment(
        loader=jinja2.PackageLoader("gateway.reports", "templates"),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=False,
    )
    env.filters.update(json=_json, pct=_pct, num=_num, points=_points, signed=_signed)
    return env


#: table rows of one text line that fit on a page beside the fixed parts, per paper size
ROW_BUDGET = {"a4": 26.0, "letter": 22.0}
# characters of a wrapping column per printed line (7.5 pt on A4's 186 mm text width)
_WIDTH = {"journal_alarms": 52, "alarms": 62, "reasons": 26, "standards": 200, "parts": 200}
_TEXT = {"journal_alarms": "message", "alarms": "message", "reasons": "category"}
# the order lists get their rows in, after every list got its first MIN_ROWS
_PRIORITY = ("journal_alarms", "reasons", "alarms", "standards", "parts")
_MAX_ROWS = {"journal_alarms": 10, "reasons": 8, "alarms": 8, "standards": 8, "parts": 8}
MIN_ROWS = 2
MAX_STATIONS = 10  # rows of the two station tables a page prints


def _lines(row: Mapping[str, Any], name: str) -> float:
    """Printed lines one row takes (its wrapping text column decides)."""
    text = str(row.get(_TEXT.get(name, ""), ""))
    return float(max(1, -(-len(text) // _WIDTH[name])))


def _limits(sec: Mapping[str, Any], budget: float) -> dict[str, int]:
    """How many rows of each table a line's page prints so that it stays one page: stations
    first (up to ``MAX_STATIONS``), then every list its first rows, then more in priority order.
    The page says how many rows were left out."""
    rows = {"journal_alarms": sec.get("journal_alarms", []), "alarms": sec["alarms"],
            "reasons": sec["rejects"]["rows"], "standards": sec["standards"],
            "parts": sec["retests"]["parts"]}
    stations = min(len(sec["stations"]), MAX_STATIONS)
    # the reasons sit beside the yield-by-station table (one row a station): lines up to its
    # rows cost nothing more
    by_station = min(len(sec["by_station"]), MAX_STATIONS)
    beside = float(by_station)
    left = budget - stations - beside
    out = dict.fromkeys(rows, 0)

    def take(name: str, upto: int) -> None:
        nonlocal left, beside
        while out[name] < min(upto, len(rows[name]), _MAX_ROWS[name]):
            cost = _lines(rows[name][out[name]], name)
            if name == "reasons":
                free = min(beside, cost)
                beside -= free
                cost -= free
            if cost > left:
                return
            left -= cost
            out[name] += 1

    for name in _PRIORITY:
        take(name, MIN_ROWS)
    for name in _PRIORITY:
        take(name, _MAX_ROWS[name])
    out["stations"] = stations
    out["by_station"] = by_station
    return out


def render_shift_html(document: Mapping[str, Any], paper: Paper = "a4") -> str:
    """The shift report document (``{"kind": "shift", "result": ...}``) as one HTML page."""
    if document.get("kind") != "shift":
        raise ValueError(f"expected a shift report document, got kind {document.get('kind')!r}")
    if paper not in PAPER_SIZES:
        raise ValueError(f"paper: expected one of {', '.join(PAPER_SIZES)}, got {paper!r}")
    r = document["result"]
    tz = ZoneInfo(str(r.get("timezone") or "UTC"))

    def local(iso: str | None, fmt: str = "%Y-%m-%d %H:%M") -> str:
        if not iso:
            return "–"
        return datetime.fromisoformat(iso).astimezone(tz).strftime(fmt)

    limits = [_limits(sec, ROW_BUDGET[paper]) for sec in r["lines"]]
    chosen = r.get("units") or {}
    units = _Units(str(chosen.get("pressure", "Pa")), str(chosen.get("leak", "sccm")))
    env = _environment().overlay()
    env.filters.update(q=lambda v: units.shown(v, "leak"), pr=lambda v: units.shown(v, "pressure"))
    when = (f"{local(r['start'])} – {local(r['end'])} local time ({r['timezone']}), "
            f"{float(r['hours']):g} h; {r['tests']} tests on {len(r['lines'])} line(s)")
    site = str(r.get("site") or "")
    return env.get_template("shift.html.j2").render(
        r=r,
        c=_COLOURS,
        limits=limits,
        local=local,
        u=units,
        when=when,
        site_name=site or "leakfleet",
        paper=paper,
        paper_size=PAPER_SIZES[paper],
        schema=int(document.get("schema", 1)),
        title=f"{site + ': ' if site else ''}Shift report {r['shift_date']} {r['shift']}",
    )
