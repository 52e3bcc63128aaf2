"""AIAG MSA 4th ed. gauge R&R example data (10 parts × 3 appraisers × 3 trials).

As reproduced in McNeese (2015), "Three Ways to Analyze a Gage R&R Study" (SPC for Excel);
rows are appraiser/trial, columns parts 1–10.
"""

from __future__ import annotations

import pandas as pd

ROWS = {
    ("A", 1): [0.29, -0.56, 1.34, 0.47, -0.80, 0.02, 0.59, -0.31, 2.26, -1.36],
    ("A", 2): [0.41, -0.68, 1.17, 0.50, -0.92, -0.11, 0.75, -0.20, 1.99, -1.25],
    ("A", 3): [0.64, -0.58, 1.27, 0.64, -0.84, -0.21, 0.66, -0.17, 2.01, -1.31],
    ("B", 1): [0.08, -0.47, 1.19, 0.01, -0.56, -0.20, 0.47, -0.63, 1.80, -1.68],
    ("B", 2): [0.25, -1.22, 0.94, 1.03, -1.20, 0.22, 0.55, 0.08, 2.12, -1.62],
    ("B", 3): [0.07, -0.68, 1.34, 0.20, -1.28, 0.06, 0.83, -0.34, 2.19, -1.50],
    ("C", 1): [0.04, -1.38, 0.88, 0.14, -1.46, -0.29, 0.02, -0.46, 1.77, -1.49],
    ("C", 2): [-0.11, -1.13, 1.09, 0.20, -1.07, -0.67, 0.01, -0.56, 1.45, -1.77],
    ("C", 3): [-0.15, -0.96, 0.67, 0.11, -1.45, -0.49, 0.21, -0.49, 1.87, -2.16],
}


def tidy() -> pd.DataFrame:
    """One row per measurement: part, operator, trial, value (trial order preserved)."""
    records = []
    for (op, trial), values in ROWS.items():
        for part, v in enumerate(values, start=1):
            records.append({"part": part, "operator": op, "trial": trial, "value": v})
    return pd.DataFrame.from_records(records).sort_values(["trial"], kind="mergesort")
