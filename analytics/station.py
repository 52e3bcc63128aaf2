"""One station's history for its page: the limits in force over time, and its figures.

A reject limit is drawn where it applied: results carry the limit of their test (from the
station, or from the plant's program sheet), and it changes when someone edits a program.
``limit_segments`` turns the results' limit column into steps (from, to, value), so a chart
shows the limit each test was judged against rather than today's limit across last month.
The lower limit is a plausibility floor for negative readings (a part leaking less than the
master), not a reject limit: callers keep the two apart by name (``LIMIT_KINDS``).

Pure: frames in, frames out.
"""

from __future__ import annotations

import pandas as pd

__all__ = ["LIMIT_KINDS", "limit_segments", "limits_of"]

#: result column → what it is called on a chart
LIMIT_KINDS: dict[str, str] = {
    "reject_limit_sccm": "reject limit",
    "lower_limit_sccm": "lower plausibility limit (not a reject limit)",
}


def limit_segments(results: pd.DataFrame, column: str, *, time_col: str = "ended_at",
                   until: pd.Timestamp | None = None) -> pd.DataFrame:
    """Steps of ``column`` over time: ``start``, ``end``, ``value``, ``tests``.

    A new step starts where the value changes (a test without a value ends the step before
    it and starts none). The last step ends at ``until`` when given, else at its last test.
    """
    cols = ["start", "end", "value", "tests"]
    if results.empty or column not in results.columns:
        return pd.DataFrame(columns=cols)
    frame = results[[time_col, column]].copy()
    frame[time_col] = pd.to_datetime(frame[time_col], utc=True)
    frame = frame.sort_values(time_col, kind="mergesort").reset_index(drop=True)
    values = pd.to_numeric(frame[column], errors="coerce")
    changed = values.ne(values.shift()) & ~(values.isna() & values.shift().isna())
    run = changed.cumsum()
    rows = []
    runs = list(frame.assign(_v=values, _run=run).groupby("_run", sort=True))
    for i, (_, g) in enumerate(runs):
        value = g["_v"].iloc[0]
        if pd.isna(value):
            continue
        if i + 1 < len(runs):
            end = runs[i + 1][1][time_col].iloc[0]
        else:
            end = until if until is not None else g[time_col].iloc[-1]
        rows.append({"start": g[time_col].iloc[0], "end": end, "value": float(value),
                     "tests": len(g)})
    return pd.DataFrame(rows, columns=cols)


def limits_of(results: pd.DataFrame, *, until: pd.Timestamp | None = None) -> pd.DataFrame:
    """Every limit kind's steps (``limit_segments``) with a ``what`` column naming it."""
    parts = [limit_segments(results, col, until=until).assign(what=label)
             for col, label in LIMIT_KINDS.items()]
    parts = [p for p in parts if not p.empty]
    if not parts:
        return pd.DataFrame(columns=["start", "end", "value", "tests", "what"])
    return pd.concat(parts, ignore_index=True)
