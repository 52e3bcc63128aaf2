"""The shift report as one self-contained, printable HTML file.

Input is the ``leakfleet report shift --json`` document; output is a single HTML string with
its CSS inline and its charts as inline SVG: no scripts, no fonts, no images, no links, so the
file opens the same on a shop-floor PC without network and in an auditor's archive years later.
Print CSS sets the page (A4 or Letter), one line per page.

Every figure printed from the document carries ``data-path`` (its place in the document's
``result``, e.g. ``lines/0/first_pass_yield``) and ``data-value`` (the JSON value), so a reader
or a test can check the page against the JSON without parsing formatted text.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from datetime import datetime
from html import escape
from typing import Any, Literal
from zoneinfo import ZoneInfo

__all__ = ["PAPER_SIZES", "render_shift_html"]

Paper = Literal["a4", "letter"]
PAPER_SIZES: dict[str, str] = {"a4": "A4", "letter": "letter"}

_PASS = "#2e7d32"
_REJECT = "#c62828"
_RETEST = "#ef6c00"
_INK = "#1f2933"
_MUTED = "#6b7785"
_GRID = "#d5dbe1"

_CSS = """
*{box-sizing:border-box}
html{-webkit-print-color-adjust:exact;print-color-adjust:exact}
body{font-family:"DejaVu Sans","Liberation Sans",Arial,Helvetica,sans-serif;color:%(ink)s;
  font-size:10pt;line-height:1.35;margin:0 auto;max-width:186mm;padding:8mm 0}
h1{font-size:16pt;margin:0 0 2mm}
h2{font-size:13pt;margin:0 0 3mm;padding-bottom:1mm;border-bottom:2px solid %(ink)s}
h3{font-size:10.5pt;margin:4mm 0 1.5mm}
.meta{color:%(muted)s;margin:0 0 3mm}
.notice{border:1px solid %(reject)s;color:%(reject)s;padding:2mm 3mm;margin:3mm 0;font-weight:bold}
.kpis{display:flex;gap:2mm;margin:2mm 0 3mm}
.kpi{flex:1;border:1px solid %(grid)s;border-radius:2mm;padding:1.5mm 2mm}
.kpi .label{color:%(muted)s;font-size:8pt;text-transform:uppercase;letter-spacing:.03em}
.kpi .value{font-size:14pt;font-weight:bold}
.charts{display:flex;gap:4mm;align-items:flex-start}
.charts figure{margin:0;flex:1}
figcaption{color:%(muted)s;font-size:8pt}
svg{display:block;max-width:100%%;height:auto}
table{border-collapse:collapse;width:100%%;font-size:8.5pt;margin:1mm 0 2mm}
th,td{border-bottom:1px solid %(grid)s;padding:.8mm 1.5mm;text-align:left;vertical-align:top}
th{color:%(muted)s;font-weight:normal;border-bottom:1px solid %(muted)s}
table.wide{font-size:7.5pt}
td.t{white-space:nowrap}
td.n,th.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.bad{color:%(reject)s;font-weight:bold}
.warn{color:%(retest)s;font-weight:bold}
.good{color:%(pass)s}
.none{color:%(muted)s;font-style:italic}
section.line,section.other{break-inside:auto}
section.line+section.line,section.line+section.other{break-before:page;margin-top:8mm}
table,figure,.kpis{break-inside:avoid}
h2,h3{break-after:avoid}
footer{color:%(muted)s;font-size:7.5pt;margin-top:6mm;border-top:1px solid %(grid)s;
  padding-top:1mm}
@page{size:%(paper)s portrait;margin:12mm 12mm 14mm}
@media print{body{max-width:none;padding:0}}
"""


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


class _Page:
    """Builds the page; ``field`` emits a figure tagged with its document path."""

    def __init__(self, result: Mapping[str, Any]) -> None:
        self.result = result
        self.tz = ZoneInfo(str(result.get("timezone") or "UTC"))
        self.parts: list[str] = []

    def add(self, *html: str) -> None:
        self.parts.extend(html)

    def local(self, iso: str | None, fmt: str = "%Y-%m-%d %H:%M") -> str:
        if not iso:
            return "–"
        return datetime.fromisoformat(iso).astimezone(self.tz).strftime(fmt)

    @staticmethod
    def field(
        path: Sequence[str | int],
        value: Any,
        text: str | None = None,
        *,
        tag: str = "span",
        cls: str = "",
    ) -> str:
        shown = _num(value) if text is None else text
        klass = f' class="{cls}"' if cls else ""
        p = "/".join(map(str, path))
        return (
            f'<{tag}{klass} data-path="{escape(p)}" data-value="{escape(_json(value))}">'
            f"{escape(shown)}</{tag}>"
        )

    def td(
        self, path: Sequence[str | int], value: Any, text: str | None = None, cls: str = "n"
    ) -> str:
        return self.field(path, value, text, tag="td", cls=cls)


def _thead(*columns: str, cls: str = "") -> str:
    """Table start with a header row; a leading ``#`` marks a right-aligned number column."""
    cells = "".join(
        f'<th class="n">{escape(c[1:])}</th>' if c.startswith("#") else f"<th>{escape(c)}</th>"
        for c in columns
    )
    klass = f' class="{cls}"' if cls else ""
    return f"<table{klass}><thead><tr>{cells}</tr></thead><tbody>"


def _bar_chart_yield(fp: float | None, final: float | None, label: str) -> str:
    """Two horizontal bars on a 0–100 % scale: first-pass and final yield."""
    w, h, left, right = 300, 74, 78, 44
    span = w - left - right
    rows = [("first-pass", fp, 12), ("final", final, 40)]
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" '
        f'height="{h}" role="img" aria-label="{escape(label)}">'
    ]
    for x in (0, 0.5, 1.0):
        gx = left + x * span
        out.append(f'<line x1="{gx:.1f}" y1="6" x2="{gx:.1f}" y2="60" stroke="{_GRID}"/>')
        out.append(
            f'<text x="{gx:.1f}" y="71" font-size="8" text-anchor="middle" '
            f'fill="{_MUTED}">{int(x * 100)} %</text>'
        )
    for name, value, y in rows:
        out.append(
            f'<text x="{left - 4}" y="{y + 12}" font-size="9" text-anchor="end" '
            f'fill="{_INK}">{name}</text>'
        )
        if value is None:
            out.append(
                f'<text x="{left + 2}" y="{y + 12}" font-size="9" fill="{_MUTED}">no parts</text>'
            )
            continue
        bw = max(0.0, min(1.0, float(value))) * span
        out.append(
            f'<rect x="{left}" y="{y}" width="{bw:.1f}" height="16" fill="{_PASS}">'
            f"<title>{name} yield {_pct(value)}</title></rect>"
        )
        out.append(
            f'<text x="{left + bw + 3:.1f}" y="{y + 12}" font-size="9" '
            f'fill="{_INK}">{_pct(value)}</text>'
        )
    out.append("</svg>")
    return "".join(out)


def _bar_chart_retests(passes: int, after: int) -> str:
    """One stacked bar: passes at the first test vs passes that needed a retest."""
    w, h, left, right = 300, 74, 8, 8
    span = w - left - right
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" '
        f'height="{h}" role="img" aria-label="passes needing a retest">'
    ]
    if passes <= 0:
        out.append(f'<text x="{left}" y="30" font-size="9" fill="{_MUTED}">no passes</text>')
    else:
        first = passes - after
        w1 = span * first / passes
        out.append(
            f'<rect x="{left}" y="14" width="{w1:.1f}" height="22" fill="{_PASS}">'
            f"<title>{first} passed at the first test</title></rect>"
        )
        out.append(
            f'<rect x="{left + w1:.1f}" y="14" width="{span - w1:.1f}" height="22" '
            f'fill="{_RETEST}"><title>{after} passed only on a retest</title></rect>'
        )
        out.append(
            f'<text x="{left}" y="52" font-size="9" fill="{_PASS}">■ {first} first test</text>'
        )
        out.append(
            f'<text x="{w - right}" y="52" font-size="9" text-anchor="end" '
            f'fill="{_RETEST}">■ {after} after retest</text>'
        )
    out.append("</svg>")
    return "".join(out)


def _pareto_chart(rows: Sequence[Mapping[str, Any]]) -> str:
    """Pareto of reject reasons: bars by falling count, cumulative share as a line."""
    shown = list(rows[:8])
    w, h, left, right, top, bottom = 660, 200, 40, 40, 12, 58
    span_x, span_y = w - left - right, h - top - bottom
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" '
        f'height="{h}" role="img" aria-label="Pareto of reject reasons">'
    ]
    top_n = max(int(r["n"]) for r in shown)
    for frac in (0, 0.25, 0.5, 0.75, 1.0):
        y = top + span_y * (1 - frac)
        out.append(
            f'<line x1="{left}" y1="{y:.1f}" x2="{w - right}" y2="{y:.1f}" stroke="{_GRID}"/>'
        )
        out.append(
            f'<text x="{left - 4}" y="{y + 3:.1f}" font-size="8" text-anchor="end" '
            f'fill="{_MUTED}">{top_n * frac:.3g}</text>'
        )
        out.append(
            f'<text x="{w - right + 4}" y="{y + 3:.1f}" font-size="8" '
            f'fill="{_MUTED}">{int(frac * 100)} %</text>'
        )
    slot = span_x / max(len(shown), 6)  # few categories: bars keep a sensible width
    points = []
    for i, r in enumerate(shown):
        n = int(r["n"])
        bh = span_y * n / top_n
        x = left + i * slot + slot * 0.15
        bw = slot * 0.7
        out.append(
            f'<rect x="{x:.1f}" y="{top + span_y - bh:.1f}" width="{bw:.1f}" height="{bh:.1f}" '
            f'fill="{_REJECT}"><title>{escape(str(r["category"]))}: {n}</title></rect>'
        )
        out.append(
            f'<text x="{x + bw / 2:.1f}" y="{top + span_y - bh - 3:.1f}" font-size="8" '
            f'text-anchor="middle" fill="{_INK}">{n}</text>'
        )
        label = str(r["category"])
        label = label if len(label) <= 24 else label[:23] + "…"
        lx, ly = x + bw / 2, top + span_y + 10
        out.append(
            f'<text x="{lx:.1f}" y="{ly:.1f}" font-size="8" text-anchor="end" fill="{_INK}" '
            f'transform="rotate(-30 {lx:.1f} {ly:.1f})">{escape(label)}</text>'
        )
        cy = top + span_y * (1 - float(r["cumulative_share"]))
        points.append(f"{x + bw / 2:.1f},{cy:.1f}")
    out.append(
        f'<polyline points="{" ".join(points)}" fill="none" stroke="{_INK}" stroke-width="1.5"/>'
    )
    for point in points:
        px, py = point.split(",")
        out.append(f'<circle cx="{px}" cy="{py}" r="2.5" fill="{_INK}"/>')
    out.append("</svg>")
    return "".join(out)


def _kpi(page: _Page, label: str, path: Sequence[str | int], value: Any, text: str) -> str:
    return (
        f'<div class="kpi"><div class="label">{escape(label)}</div>'
        f"{page.field(path, value, text, tag='div', cls='value')}</div>"
    )


def _line_charts(page: _Page, sec: Mapping[str, Any]) -> None:
    rt = sec["retests"]
    page.add(
        '<div class="charts"><figure>',
        _bar_chart_yield(sec["first_pass_yield"], sec["final_yield"], "yield"),
        "<figcaption>First-pass yield: the part's first test passed. Final yield: its latest "
        "test by the end of the shift passed.</figcaption></figure><figure>",
        _bar_chart_retests(int(rt["passes"]), int(rt["passed_after_retest"])),
        "<figcaption>Passes in this shift, by whether the part needed a retest.</figcaption>",
        "</figure></div>",
    )


def _line(page: _Page, i: int, sec: Mapping[str, Any]) -> None:
    base: list[str | int] = ["lines", i]
    f = page.field
    page.add(f'<section class="line" data-line="{escape(str(sec["line"]))}">')
    page.add(f"<h2>Line {escape(str(sec['line']))}</h2>")
    if not sec["has_data"]:
        page.add('<p class="notice">No tests on this line in this shift.</p>')
    page.add(
        '<div class="kpis">',
        _kpi(page, "tests", [*base, "tests"], sec["tests"], str(sec["tests"])),
        _kpi(page, "parts", [*base, "parts"], sec["parts"], str(sec["parts"])),
        _kpi(
            page,
            "first-pass yield",
            [*base, "first_pass_yield"],
            sec["first_pass_yield"],
            _pct(sec["first_pass_yield"]),
        ),
        _kpi(
            page,
            "final yield",
            [*base, "final_yield"],
            sec["final_yield"],
            _pct(sec["final_yield"]),
        ),
        _kpi(
            page,
            "passes after retest",
            [*base, "retests", "share"],
            sec["retests"]["share"],
            _pct(sec["retests"]["share"]),
        ),
        "</div>",
    )
    rt = sec["retests"]
    if sec["has_data"]:
        _line_charts(page, sec)
    page.add(
        '<p class="meta">',
        f([*base, "first_pass"], sec["first_pass"]),
        " of ",
        f([*base, "parts"], sec["parts"]),
        " parts passed at their first test, ",
        f([*base, "final_pass"], sec["final_pass"]),
        " by the end of the shift; ",
        f([*base, "aborted"], sec["aborted"]),
        " aborted test(s); ",
        f([*base, "tests_without_part_id"], sec["tests_without_part_id"]),
        " test(s) without a part id (yield basis: ",
        f([*base, "basis"], sec["basis"], sec["basis"]),
        ")." + (f" {escape(sec['note'])}." if sec["note"] and sec["has_data"] else ""),
        "</p>",
    )

    if sec["by_station"]:
        page.add(
            "<h3>Yield by station (parts by their first test)</h3>",
            _thead(
                "station",
                "#tests",
                "#parts",
                "#first-pass",
                "#final",
                "#retested parts",
                "#test-level",
            ),
        )
        for j, r in enumerate(sec["by_station"]):
            p = [*base, "by_station", j]
            page.add(
                f'<tr data-station="{escape(str(r["group"]["station"]))}">'
                f"<td>{escape(str(r['group']['station']))}</td>",
                page.td([*p, "tests"], r["tests"]),
                page.td([*p, "parts"], r["parts"]),
                page.td(
                    [*p, "first_pass_yield"], r["first_pass_yield"], _pct(r["first_pass_yield"])
                ),
                page.td([*p, "final_yield"], r["final_yield"], _pct(r["final_yield"])),
                page.td([*p, "retested_parts"], r["retested_parts"]),
                page.td([*p, "test_yield"], r["test_yield"], _pct(r["test_yield"])),
                "</tr>",
            )
        page.add("</tbody></table>")

    rej = sec["rejects"]
    page.add(
        "<h3>Rejects by reason (",
        f([*base, "rejects", "total"], rej["total"]),
        " rejected tests)</h3>",
    )
    if rej["rows"]:
        page.add("<figure>", _pareto_chart(rej["rows"]), "</figure>")
        page.add(
            _thead("reason", "#tests", "#share", "#cumulative"),
        )
        for j, r in enumerate(rej["rows"]):
            p = [*base, "rejects", "rows", j]
            page.add(
                f'<tr data-category="{escape(str(r["category"]))}">'
                f"<td>{escape(str(r['category']))}</td>",
                page.td([*p, "n"], r["n"]),
                page.td([*p, "share"], r["share"], _pct(r["share"])),
                page.td(
                    [*p, "cumulative_share"], r["cumulative_share"], _pct(r["cumulative_share"])
                ),
                "</tr>",
            )
        page.add("</tbody></table>")
    else:
        page.add('<p class="none">No rejects.</p>')

    page.add(
        "<h3>Retests</h3><p>",
        f([*base, "retests", "passed_after_retest"], rt["passed_after_retest"]),
        " of ",
        f([*base, "retests", "passes"], rt["passes"]),
        " passes in this shift needed a retest (",
        f([*base, "retests", "share"], rt["share"], _pct(rt["share"])),
        "). Passed only after two or more rejects: ",
        escape(", ".join(rt["after_two_or_more_rejects"]) or "none"),
        ". Marginal passes after a reject (in the guard band): ",
        escape(", ".join(rt["marginal"]) or "none"),
        ".</p>",
    )
    if rt["parts"]:
        page.add(
            _thead("part", "passed on", "at", "#leak sccm", "#rejects before", "#marginal"),
        )
        for j, r in enumerate(rt["parts"]):
            p = [*base, "retests", "parts", j]
            page.add(
                f'<tr data-part="{escape(str(r["part_id"]))}"><td>{escape(str(r["part_id"]))}</td>'
                f"<td>{escape(str(r['station']))}</td>",
                f"<td>{page.local(r['ended_at'], '%H:%M')}</td>",
                page.td([*p, "leak_rate_sccm"], r["leak_rate_sccm"]),
                page.td([*p, "rejects_before"], r["rejects_before"]),
                page.td([*p, "marginal"], r["marginal"], cls="n warn" if r["marginal"] else "n"),
                "</tr>",
            )
        page.add("</tbody></table>")

    page.add(
        "<h3>Stations: calibration state at the end of the shift</h3>",
        _thead(
            "station",
            "#tests",
            "state",
            "calibration",
            "last calibrated",
            "#master Pa",
            "#standard Pa",
            "#ratio",
            "#sccm/Pa",
            "#in shift (failed)",
            "standard",
            "drift",
            cls="wide",
        ),
    )
    for j, s in enumerate(sec["stations"]):
        p = [*base, "stations", j]
        state = s["calibration_state"]
        cls = "good" if state == "ok" else "bad"
        page.add(
            f'<tr data-station="{escape(str(s["station"]))}"><td>{escape(str(s["station"]))}</td>',
            page.td([*p, "tests"], s["tests"]),
            f"<td>{escape(s['state_at_end'] or '–')}</td>",
            page.td([*p, "calibration_state"], state, state, cls=cls),
            f'<td class="t">{page.local(s["last_calibration_at"], "%d %b %H:%M")}</td>',
            page.td([*p, "master_loss_pa"], s["master_loss_pa"]),
            page.td([*p, "standard_loss_pa"], s["standard_loss_pa"]),
            page.td([*p, "ratio"], s["ratio"]),
            page.td([*p, "sensitivity"], s["sensitivity"]),
            '<td class="n">',
            f([*p, "calibrations_in_shift"], s["calibrations_in_shift"]),
            " (",
            f([*p, "failed_calibrations_in_shift"], s["failed_calibrations_in_shift"]),
            ")</td>",
            f"<td>{escape(s['standard_serial'] or '–')}</td>",
            f"<td>{escape(s['drift'] or '–')}</td></tr>",
        )
    if not sec["stations"]:
        page.add('<tr><td colspan="12" class="none">No stations known on this line.</td></tr>')
    page.add("</tbody></table>")

    page.add("<h3>Alarms in this shift</h3>")
    if sec["alarms"]:
        page.add(
            _thead("at", "station", "source", "kind", "message"),
        )
        for a in sec["alarms"]:
            page.add(
                f'<tr class="alarm" data-source="{escape(a["source"])}">'
                f"<td>{page.local(a['at'], '%H:%M')}</td><td>{escape(a['station'])}</td>"
                f'<td>{escape(a["source"])}</td><td class="bad">{escape(a["kind"])}</td>'
                f"<td>{escape(a['message'])}</td></tr>"
            )
        page.add("</tbody></table>")
    else:
        page.add('<p class="none">No alarms.</p>')
    _standards(page, [*base, "standards"], sec["standards"], "Leak standards")
    page.add("</section>")


def _standards(
    page: _Page, path: list[str | int], rows: Sequence[Mapping[str, Any]], title: str
) -> None:
    r0 = page.result
    page.add(
        f"<h3>{escape(title)} (on {escape(str(r0['standards_judged_on']))}, due within "
        f"{int(r0['within_days'])} days)</h3>"
    )
    if not rows:
        page.add('<p class="none">No leak standard registered for these stations.</p>')
        return
    page.add(
        _thead("serial", "station", "#nominal sccm", "due", "#days left", "status"),
    )
    for j, s in enumerate(rows):
        p = [*path, j]
        cls = {"overdue": "bad", "due soon": "warn"}.get(s["status"], "good")
        page.add(
            f'<tr data-serial="{escape(str(s["serial"]))}"><td>{escape(str(s["serial"]))}</td>'
            f"<td>{escape(str(s['station']))}</td>",
            page.td([*p, "nominal_sccm"], s["nominal_sccm"]),
            f"<td>{escape(str(s['due_date']))}</td>",
            page.td([*p, "days_left"], s["days_left"]),
            page.td([*p, "status"], s["status"], s["status"], cls=cls),
            "</tr>",
        )
    page.add("</tbody></table>")


def render_shift_html(document: Mapping[str, Any], paper: Paper = "a4") -> str:
    """The shift report document (``{"kind": "shift", "result": ...}``) as one HTML page."""
    if document.get("kind") != "shift":
        raise ValueError(f"expected a shift report document, got kind {document.get('kind')!r}")
    if paper not in PAPER_SIZES:
        raise ValueError(f"paper: expected one of {', '.join(PAPER_SIZES)}, got {paper!r}")
    r = document["result"]
    page = _Page(r)
    title = f"Shift report {r['shift_date']} {r['shift']}"
    css = _CSS % {
        "ink": _INK,
        "muted": _MUTED,
        "reject": _REJECT,
        "grid": _GRID,
        "retest": _RETEST,
        "pass": _PASS,
        "paper": PAPER_SIZES[paper],
    }
    page.add(
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{escape(title)}</title><style>{css}</style></head>",
        f'<body data-kind="shift" data-schema="{int(document.get("schema", 1))}" '
        f'data-paper="{paper}">',
        f"<header><h1>{escape(title)}</h1>",
        '<p class="meta">',
        f"{page.local(r['start'])} – {page.local(r['end'])} local time ({escape(r['timezone'])}); ",
        f"UTC {escape(r['start'][:16].replace('T', ' '))} – "
        f"{escape(r['end'][:16].replace('T', ' '))}; ",
        page.field(["hours"], r["hours"], f"{float(r['hours']):g}"),
        " h; ",
        page.field(["tests"], r["tests"]),
        " tests on ",
        str(len(r["lines"])),
        " line(s).",
        "</p></header>",
    )
    if not r["has_data"]:
        page.add(f'<p class="notice" data-path="note">{escape(r["note"] or "no data")}.</p>')
    for i, sec in enumerate(r["lines"]):
        _line(page, i, sec)
    if r.get("other_standards"):
        page.add('<section class="other"><h2>Stations on no line</h2>')
        _standards(page, ["other_standards"], r["other_standards"], "Leak standards")
        page.add("</section>")
    page.add(
        "<footer>leakfleet shift report, schema ",
        str(int(document.get("schema", 1))),
        ". Parts count in the shift of their first test; retested passes in the shift where the "
        "pass ran. History used from ",
        escape(page.local(r["history_since"])),
        ". The same figures are in <code>leakfleet report shift --json</code>.</footer>",
        "</body></html>",
    )
    return "".join(page.parts)
