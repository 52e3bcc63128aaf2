"""Reports: each kind in its own module turns (options, store) into a ``Report`` with
JSON-ready figures and a text rendering; the shift report also renders as a printable page.

Figures come from ``analytics``; this package reads the store and files (``common``,
``inputs``, ``settings``) and lays the figures out (``tables``, ``shift_html``). The CLI
(``leakfleet report``) and the dashboard both call ``build_report``, so a figure cannot differ
between them. Renderers are pure: a JSON-ready document in, a string out.
"""

from gateway.reports.build import BUILDERS, build_report
from gateway.reports.common import KINDS, SCHEMA, Filters, Report, filters_from
from gateway.reports.inputs import read_tidy_csv
from gateway.reports.shift_html import render_shift_html

__all__ = [
    "BUILDERS",
    "KINDS",
    "SCHEMA",
    "Filters",
    "Report",
    "build_report",
    "filters_from",
    "read_tidy_csv",
    "render_shift_html",
]
