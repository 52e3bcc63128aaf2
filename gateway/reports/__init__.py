"""Printable documents rendered from report JSON (``leakfleet report ... --json`` documents).

Renderers are pure: a JSON-ready document in, a string out. They never compute a figure, they
only lay out the numbers the report already holds, so the printed page and the JSON agree by
construction (and the tests check it in a real browser).
"""

from gateway.reports.shift_html import render_shift_html

__all__ = ["render_shift_html"]
