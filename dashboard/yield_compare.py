"""The Yield page's comparisons: day by day, week over week, shift against shift, the same
shift across days; each against the target, weighted by volume. Widgets and layout only:
the figures come from ``analytics.compare``."""

from __future__ import annotations

import altair as alt
import pandas as pd
import streamlit as st

from analytics.compare import (
    PeriodSummary,
    against_target,
    by_period,
    shift_against_shift,
    summarise,
    week_over_week,
    yield_axis,
)
from analytics.shifts import ShiftCalendar
from dashboard import charts
from dashboard.printing import show_table

__all__ = ["COMPARISONS", "compare_section"]

COMPARISONS = {
    "Day by day": "day",
    "Week over week": "week",
    "Shift against shift": "shift",
    "Same shift across days": "same_shift",
}


def _pct(value: float | None) -> str:
    return "–" if value is None or pd.isna(value) else f"{float(value):.1%}"


def _pp(value: float | None) -> str:
    return "–" if value is None or pd.isna(value) else f"{float(value):+.1f} pp"


def _summary_line(s: PeriodSummary, what: str, target: float) -> str:
    if s.weighted_yield is None:
        return f"No volume in these {what}."
    if s.periods == 1:
        what = what[:-1]
    text = (f"Over {s.periods} {what} with volume ({s.total:,} counted): **{_pct(s.weighted_yield)}"
            f"** weighted by volume (each {what.rstrip('s')} counts by its parts or tests)")
    text += (f", {_pct(s.unweighted_yield)} as a plain mean of the {what}; " if s.periods > 1
             else "; ")
    text += f"target {target:.1%}."
    if s.thin_periods:
        text += (f" {s.thin_periods} of them had under a quarter of an even share of the "
                 "volume: small dots and short bars below.")
    return text


def _show(pair: tuple[charts.Layered, alt.Chart]) -> None:
    top, volume = pair
    st.altair_chart(top, width="stretch", key="yield_compare_chart")
    st.altair_chart(volume, width="stretch", key="yield_volume_chart")


def compare_section(hourly: pd.DataFrame, calendar: ShiftCalendar, *, measure: str,
                    target: float, choice: str, height: int = 240) -> None:
    """``hourly``: UTC ``bucket, good, total`` of the page's selection (``good_total``)."""
    kind = COMPARISONS[choice]
    period = "shift" if kind in ("shift", "same_shift") else kind
    periods = by_period(hourly, calendar, period)  # type: ignore[arg-type]
    periods = against_target(periods, target)
    if periods.empty or int(periods["total"].sum()) == 0:
        st.caption("Nothing to compare in this range and selection.")
        return
    what = {"day": "days", "week": "weeks", "shift": "shifts"}[period]
    st.markdown(_summary_line(summarise(periods), what, target))
    domain = yield_axis(periods["yield"], target)
    if kind == "shift":
        table = shift_against_shift(periods, calendar)
        shown = table.rename(columns={"shift": "period"}).assign(
            share=table["total"] / table["total"].sum())
        _show(charts.yield_periods(shown, measure=measure, domain=domain, target=target,
                                   height=height))
        show_table(pd.DataFrame({
            "Shift": table["shift"], "Shifts run": table["shifts"],
            "Volume": [f"{n:,}" for n in table["total"]],
            "Yield (weighted)": table["yield"].map(_pct),
            "Plain mean of shifts": table["mean_of_shifts"].map(_pct),
            "Lowest shift": table["lowest"].map(_pct),
            "Highest shift": table["highest"].map(_pct),
            "Against all shifts": table["vs_all_pp"].map(_pp),
            "Against target": ((table["yield"] - target) * 100).map(_pp),
        }), "yield_compare_table")  # fmt: skip
        return
    if kind == "week":
        periods = week_over_week(periods)
    same_shift = kind == "same_shift"
    _show(charts.yield_periods(periods, measure=measure, domain=domain, target=target,
                               colour="shift" if same_shift else None,
                               x="day" if same_shift else "period", height=height))
    floor = f"{domain[0]:.0%}"
    st.caption(f"The yield axis starts at {floor} so small differences stay small; dot size "
               "and bar height are the volume. Dashed line: the target.")
    if same_shift:
        first = {"Day": periods["day"], "Shift": periods["shift"]}
    elif kind == "week":
        first = {"Week": periods["period"], "From": periods["day"]}
    else:
        first = {"Day": periods["period"]}
    table = pd.DataFrame({
        **first,
        "Volume": [f"{n:,}" for n in periods["total"]],
        "Share of volume": periods["share"].map(_pct),
        "Yield": periods["yield"].map(_pct),
        "Against target": periods["gap_pp"].map(_pp),
    })  # fmt: skip
    if kind == "week":
        table["Change on the week before"] = periods["change_pp"].map(_pp)
    show_table(table, "yield_compare_table")
