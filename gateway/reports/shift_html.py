"""The shift report as one self-contained, printable HTML file.

Input is the ``leakfleet report shift --json`` document; output is a single HTML string with
its CSS inline and its charts as inline SVG: no scripts, no fonts, no images, no links, so the
file opens the same on a shop-floor PC without network and in an auditor's archive years later.
Print CSS sets the page (A4 or Letter), one line per page.

Every figure printed from the document carries ``data-path`` (its place in the document's
``result``, e.g. ``lines/0/first_pass_yield``) and ``data-value`` (the JSON value), so a reader
or a test can check the page against the JSON without parsing formatted text.

The page is the jinja2 template ``templates/shift.html.j2`` (autoescape on: every value from
the document is escaped); this module only computes the charts' geometry and renders.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from datetime import datetime
from functools import cache
from typing import Any, Literal
from zoneinfo import ZoneInfo

import jinja2

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
    env.filters.update(json=_json, pct=_pct, num=_num)
    return env


def _yield_chart(fp: float | None, final: float | None, label: str) -> dict[str, Any]:
    """Two horizontal bars on a 0–100 % scale: first-pass and final yield."""
    w, h, left, right = 300, 74, 78, 44
    span = w - left - right
    bars = []
    for name, value, y in (("first-pass", fp, 12), ("final", final, 40)):
        bw = 0.0 if value is None else max(0.0, min(1.0, float(value))) * span
        bars.append({"name": name, "value": value, "y": y, "width": f"{bw:.1f}",
                     "text_x": f"{left + bw + 3:.1f}"})
    grid = [{"x": f"{left + x * span:.1f}", "label": f"{int(x * 100)} %"} for x in (0, 0.5, 1.0)]
    return {"w": w, "h": h, "left": left, "label": label, "grid": grid, "bars": bars}


def _retest_chart(passes: int, after: int) -> dict[str, Any]:
    """One stacked bar: passes at the first test vs passes that needed a retest."""
    w, h, left, right = 300, 74, 8, 8
    span = w - left - right
    w1 = span * (passes - after) / passes if passes > 0 else 0.0
    return {"w": w, "h": h, "left": left, "right": right, "passes": passes, "after": after,
            "first": passes - after, "w1": f"{w1:.1f}", "x2": f"{left + w1:.1f}",
            "w2": f"{span - w1:.1f}"}


def _pareto_chart(rows: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """Pareto of reject reasons: bars by falling count, cumulative share as a line."""
    shown = list(rows[:8])
    w, h, left, right, top, bottom = 660, 200, 40, 40, 12, 58
    span_x, span_y = w - left - right, h - top - bottom
    top_n = max(int(r["n"]) for r in shown)
    grid = []
    for frac in (0, 0.25, 0.5, 0.75, 1.0):
        y = top + span_y * (1 - frac)
        grid.append({"y": f"{y:.1f}", "ty": f"{y + 3:.1f}", "count": f"{top_n * frac:.3g}",
                     "share": f"{int(frac * 100)} %"})
    slot = span_x / max(len(shown), 6)  # few categories: bars keep a sensible width
    bars, points = [], []
    for i, r in enumerate(shown):
        n = int(r["n"])
        bh = span_y * n / top_n
        x = left + i * slot + slot * 0.15
        bw = slot * 0.7
        label = str(r["category"])
        label = label if len(label) <= 24 else label[:23] + "…"
        bars.append({"x": f"{x:.1f}", "y": f"{top + span_y - bh:.1f}", "w": f"{bw:.1f}",
                     "h": f"{bh:.1f}", "n": n, "category": str(r["category"]), "label": label,
                     "cx": f"{x + bw / 2:.1f}", "ny": f"{top + span_y - bh - 3:.1f}",
                     "ly": f"{top + span_y + 10:.1f}"})
        cy = top + span_y * (1 - float(r["cumulative_share"]))
        points.append((f"{x + bw / 2:.1f}", f"{cy:.1f}"))
    return {"w": w, "h": h, "left": left, "right": right, "grid": grid, "bars": bars,
            "points": points}


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

    charts = [
        {
            "yields": _yield_chart(sec["first_pass_yield"], sec["final_yield"], "yield"),
            "retests": _retest_chart(int(sec["retests"]["passes"]),
                                     int(sec["retests"]["passed_after_retest"])),
            "pareto": _pareto_chart(sec["rejects"]["rows"]) if sec["rejects"]["rows"] else None,
        }
        for sec in r["lines"]
    ]
    return _environment().get_template("shift.html.j2").render(
        r=r,
        c=_COLOURS,
        charts=charts,
        local=local,
        paper=paper,
        paper_size=PAPER_SIZES[paper],
        schema=int(document.get("schema", 1)),
        title=f"Shift report {r['shift_date']} {r['shift']}",
    )
