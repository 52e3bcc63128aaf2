"""The print view of a page: ``?print=1`` (and ``&paper=letter`` for US Letter).

A Streamlit page scrolls inside a fixed-height frame, so a browser printing it as it stands
gets the first screenful and charts cut at the page edge. The print view hides the sidebar,
the header and every widget (the choices travel in the link's query parameters and are
named in a caption instead), lets the page flow to its full length, and tells the browser
the paper size and not to split a chart or a table across pages. The user then prints with
the browser's Print → Save as PDF.
"""

from __future__ import annotations

from typing import Any

import pandas as pd
import streamlit as st

__all__ = ["PAPERS", "hide_for_print", "print_link", "printing", "show_table"]

PAPERS = {"a4": "A4 portrait", "letter": "letter portrait"}
#: widgets, buttons and chrome: nothing to click on paper
_HIDDEN = ", ".join(f"[data-testid='{t}']" for t in (
    "stSidebar", "stSidebarCollapsedControl", "stHeader", "stToolbar", "stDecoration",
    "stStatusWidget", "stSelectbox", "stNumberInput", "stDateInput", "stMultiSelect",
    "stRadio", "stCheckbox", "stDownloadButton", "stForm", "stButton", "stPageLink",
    "stSegmentedControl", "stExpander",
))  # fmt: skip
_FLOW = ", ".join(f"[data-testid='{t}']" for t in (
    "stApp", "stAppViewContainer", "stMain", "stMainBlockContainer",
))  # fmt: skip


def printing() -> bool:
    """Whether the page was opened as its print view."""
    return st.query_params.get("print") in ("1", "true", "yes")


def hide_for_print() -> None:
    """Inject the print view's CSS and say how to make the PDF (call once, near the top)."""
    paper = PAPERS.get(str(st.query_params.get("paper", "a4")).lower(), PAPERS["a4"])
    st.html(
        "<style>"
        f"{_HIDDEN} {{display: none !important;}}"
        f"{_FLOW} {{overflow: visible !important; height: auto !important;"
        " position: static !important;}"
        ".block-container {max-width: 100% !important; padding: 0.5rem 1rem !important;}"
        "@media print {"
        f"  @page {{size: {paper}; margin: 10mm;}}"
        "  html {font-size: 13px;}"
        "  [data-testid='stTable'] td {overflow-wrap: anywhere;}"
        "  html, body {height: auto !important; overflow: visible !important;}"
        "  .lf-screen-only {display: none !important;}"
        "  [data-testid='stVegaLiteChart'], [data-testid='stTable'], [data-testid='stMetric'],"
        "  [data-testid='stHorizontalBlock'] {break-inside: avoid; page-break-inside: avoid;}"
        "  svg, canvas {max-width: 100% !important; height: auto !important;}"
        "  h2, h3 {break-after: avoid; page-break-after: avoid;}"
        "}"
        "</style>"
    )
    st.markdown(
        "<div class='lf-screen-only'>Print view: use your browser's <b>Print → Save as "
        f"PDF</b> ({paper}; the page sets the size and margins). Remove <code>print=1</code> "
        "from the address for the interactive page.</div>",
        unsafe_allow_html=True,
    )


def print_link(page: str, params: dict[str, str], label: str = "Print view (A4 / Letter)"
               ) -> None:
    """A link to this page's print view with the current choices."""
    st.page_link(page, label=label, icon=":material/print:",
                 query_params={**params, "print": "1"})


def show_table(frame: pd.DataFrame, key: str, *, rows: int = 12, **kwargs: Any) -> None:
    """An interactive table on screen, a plain one of the first ``rows`` rows on paper (a
    scrolling grid prints as its visible part only), saying how many rows were left out."""
    if not printing():
        st.dataframe(frame, hide_index=True, width="stretch", key=key, **kwargs)
        return
    st.table(frame.head(rows), hide_index=True, border="horizontal")
    if len(frame) > rows:
        st.caption(f"First {rows} of {len(frame):,} rows; the interactive page has them all.")
