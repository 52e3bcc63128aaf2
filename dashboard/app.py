"""Entry point: ``streamlit run dashboard/app.py`` (``leakfleet dashboard`` does this for you).

Configured by environment (see dashboard.settings): LEAKFLEET_STORE, LEAKFLEET_CONFIG,
LEAKFLEET_CLOCK. Optional login: see dashboard/README.md.
"""

from __future__ import annotations

import sys
from pathlib import Path

import streamlit as st

# ``streamlit run`` puts this file's folder on sys.path, not the project root
_ROOT = str(Path(__file__).resolve().parents[1])
if _ROOT not in sys.path:
    sys.path.insert(0, _ROOT)

from dashboard.auth import gate  # noqa: E402
from dashboard.common import settings, sidebar  # noqa: E402

# no page_icon: an icon name would make the browser fetch it from the internet
st.set_page_config(page_title="leakfleet", layout="wide")

_PAGES = [
    st.Page("views/fleet.py", title="Fleet live", default=True),
    st.Page("views/station.py", title="Station"),
    st.Page("views/yields.py", title="Yield"),
    st.Page("views/shift.py", title="Shift report"),
    st.Page("views/readings.py", title="Readings vs limits"),
    st.Page("views/calibration.py", title="Calibration"),
    st.Page("views/gauge.py", title="Gauge study & test time"),
    st.Page("views/traces.py", title="Pressure traces"),
    st.Page("views/quality.py", title="Quality"),
    st.Page("views/data_view.py", title="Data"),
    st.Page("views/health.py", title="Gateway & sink health"),
]

gate()
cfg = settings()
nav = st.navigation(_PAGES)
sidebar(cfg)
nav.run()
