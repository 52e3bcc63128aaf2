"""Every chart of the dashboard (altair). Inputs are small, already aggregated frames in display
units; each function returns a chart the page hands to ``st.altair_chart``."""

from __future__ import annotations

from collections.abc import Sequence

import altair as alt
import pandas as pd

from analytics import ControlChart, Histogram, ParetoReport

__all__ = [
    "SERIES_COLOURS",
    "advice_curve",
    "control_chart",
    "histogram",
    "history",
    "pareto",
    "plant_clock",
    "series",
    "station_leak",
    "verdict_trend",
    "yield_periods",
    "yield_trend",
]

#: time axes in 24-hour wall-clock time at every zoom level (Vega-Lite's dynamic time format
#: object); the frames hold naive plant-zone times (``plant_clock``), which the browser shows as
#: they are, so a chart and a table beside it show the same hour whatever the viewer's zone
_TIME_FORMAT = {
    "year": "%Y", "quarter": "%Y-%m", "month": "%Y-%m", "week": "%m-%d", "date": "%m-%d",
    "hours": "%H:%M", "minutes": "%H:%M", "seconds": "%H:%M:%S", "milliseconds": "%H:%M:%S.%L",
}  # fmt: skip
_TIP_FORMAT = "%Y-%m-%d %H:%M:%S"


@alt.theme.register("leakfleet", enable=True)
def _theme() -> alt.theme.ThemeConfig:
    """Every chart drawn as SVG (vega-embed reads ``usermeta.embedOptions``): a printed page
    or PDF keeps charts sharp, and each mark carries an ARIA label with its values, which a
    screen reader (and the browser tests) can read; the charts hold at most a few thousand
    marks, where SVG is as quick as canvas."""
    return alt.theme.ThemeConfig(usermeta={"embedOptions": {"renderer": "svg"}})


def plant_clock(df: pd.DataFrame, timezone: str) -> pd.DataFrame:
    """Every time column as naive wall-clock time in ``timezone`` (the plant's by default).

    Vega-Lite turns zoned times into the *browser's* zone, so a chart on a laptop abroad (or a
    PC set to UTC) disagreed with the tables by hours; a naive time is shown unchanged.
    """
    out = df.copy()
    for col in out.columns:
        if isinstance(out[col].dtype, pd.DatetimeTZDtype):
            out[col] = out[col].dt.tz_convert(timezone).dt.tz_localize(None)
    return out


def _time_x(field: str) -> alt.X:
    return alt.X(f"{field}:T", title=None, axis=alt.Axis(format=_TIME_FORMAT))


def _time_tip(field: str) -> alt.Tooltip:
    return alt.Tooltip(f"{field}:T", format=_TIP_FORMAT, title="time")


#: what ``alt.layer(...).properties(...)`` is typed as
Layered = alt.LayerChart | alt.FacetChart

_VERDICT_COLOURS = alt.Scale(
    domain=["pass", "reject", "gross", "aborted"],
    range=["#4c9a5f", "#d9822b", "#b23a48", "#8d8d8d"],
)


def yield_trend(df: pd.DataFrame, x: str, y: str, colour: str | None, title: str,
                domain: tuple[float, float] = (0.9, 1.0)) -> alt.Chart:
    """Yield (0..1) over time or periods, one line per group, on a fixed floor (``domain``,
    from ``analytics.compare.yield_axis``) so noise is not stretched to the full height."""
    chart = (
        alt.Chart(df)
        .mark_line(point=True, color=SERIES_COLOURS[0])
        .encode(
            x=alt.X(f"{x}:O", title=None),
            y=alt.Y(f"{y}:Q", title=f"{title} [%]", axis=alt.Axis(format="%"),
                    scale=alt.Scale(domain=list(domain), clamp=True)),
            tooltip=[alt.Tooltip(c, title=c.replace("_", " "), format=".1%") if c == y
                     else alt.Tooltip(c, title=c.replace("_", " ")) for c in df.columns],
        )
    )
    if colour:
        chart = chart.encode(color=alt.Color(f"{colour}:N", scale=alt.Scale(range=SERIES_COLOURS)))
    return chart.properties(height=260)


def verdict_trend(df: pd.DataFrame, x: str) -> alt.Chart:
    """Stacked test counts per verdict over time."""
    return (
        alt.Chart(df)
        .mark_bar()
        .encode(
            x=alt.X(f"{x}:O", title=None),
            y=alt.Y("n:Q", title="tests"),
            color=alt.Color("verdict:N", scale=_VERDICT_COLOURS),
            tooltip=[alt.Tooltip(x, title="period"), "verdict", alt.Tooltip("n:Q", title="tests")],
        )
        .properties(height=220)
    )


def pareto(report: ParetoReport, title: str) -> Layered:
    """Bars by falling count with the cumulative share as a line."""
    df = pd.DataFrame([r.to_dict() for r in report.rows])
    order = list(df["category"])
    bars = (
        alt.Chart(df)
        .mark_bar(color="#d9822b")
        .encode(
            x=alt.X("category:N", sort=order, title=title,
                    axis=alt.Axis(labelLimit=220, labelAngle=-35)),
            y=alt.Y("n:Q", title="count"),
            tooltip=[alt.Tooltip("category:N", title="reason"), alt.Tooltip("n:Q", title="tests"),
                     alt.Tooltip("share:Q", format=".1%", title="share")],
        )
    )
    line = (
        alt.Chart(df)
        .mark_line(point=True, color="#333")
        .encode(
            x=alt.X("category:N", sort=order),
            y=alt.Y("cumulative_share:Q", title="cumulative", axis=alt.Axis(format="%")),
        )
    )
    return alt.layer(bars, line).resolve_scale(y="independent").properties(height=260)


def histogram(
    hist: Histogram, factor: float, unit: str, guard_band: float | None, title: str = ""
) -> Layered:
    """Bars of a histogram with the reject limit, lower limit and guard band drawn."""
    edges = [e * factor for e in hist.edges]
    bins = pd.DataFrame(
        {"lo": edges[:-1], "hi": edges[1:], "n": hist.counts}
    ) if edges else pd.DataFrame({"lo": [], "hi": [], "n": []})  # fmt: skip
    layers: list[alt.Chart] = [
        alt.Chart(bins)
        .mark_bar(color="#5b7fa6")
        .encode(
            x=alt.X("lo:Q", title=f"leak rate [{unit}]", bin="binned"),
            x2="hi:Q",
            y=alt.Y("n:Q", title="tests"),
            tooltip=[alt.Tooltip("lo:Q", format=".3g", title=f"from [{unit}]"),
                     alt.Tooltip("hi:Q", format=".3g", title=f"to [{unit}]"),
                     alt.Tooltip("n:Q", title="tests")],
        )
    ]
    marks = []
    if hist.reject_limit is not None:
        marks.append({"x": hist.reject_limit * factor, "what": "reject limit"})
    if hist.lower_limit is not None:
        marks.append({"x": hist.lower_limit * factor, "what": "lower plausibility limit"})
    if hist.reject_limit is not None and guard_band:
        band = pd.DataFrame(
            [{"a": (hist.reject_limit - guard_band) * factor, "b": hist.reject_limit * factor}]
        )
        layers.insert(
            0, alt.Chart(band).mark_rect(color="#f2c14e", opacity=0.3).encode(x="a:Q", x2="b:Q")
        )
        marks.append({"x": (hist.reject_limit - guard_band) * factor, "what": "guard band"})
    if marks:
        layers.append(
            alt.Chart(pd.DataFrame(marks))
            .mark_rule(strokeWidth=2)
            .encode(
                x="x:Q",
                # only the reject limit is drawn solid: the others judge no part
                strokeDash=alt.StrokeDash(
                    "what:N", legend=None,
                    scale=alt.Scale(domain=["reject limit", "lower plausibility limit",
                                            "guard band"], range=[[1, 0], [4, 3], [2, 2]]),
                ),
                color=alt.Color(
                    "what:N",
                    scale=alt.Scale(
                        domain=["reject limit", "lower plausibility limit", "guard band"],
                        range=["#b23a48", "#6a4c93", "#c9a227"],
                    ),
                    title=None,
                ),
                tooltip=[alt.Tooltip("what:N", title="line"),
                         alt.Tooltip("x:Q", format=".3g", title=f"value [{unit}]")],
            )
        )
    return alt.layer(*layers).properties(height=240, title=title)


def series(df: pd.DataFrame, y: str, title: str, alarms: pd.DataFrame | None = None) -> alt.Chart:
    """One calibration quantity over time; failed calibrations as red points, alarms as rules."""
    base = alt.Chart(df).encode(x=_time_x("ended_at"))
    line = base.mark_line(color="#5b7fa6").encode(
        y=alt.Y(f"{y}:Q", title=title, scale=alt.Scale(zero=False))
    )
    points = base.mark_point(filled=True, size=40).encode(
        y=f"{y}:Q",
        color=alt.Color(
            "outcome:N",
            scale=alt.Scale(domain=["passed", "failed"], range=["#5b7fa6", "#b23a48"]),
            title=None,
        ),
        tooltip=[_time_tip("ended_at"), alt.Tooltip(f"{y}:Q", format=".4g", title=title),
                 "outcome", "reason"],
    )
    chart = line + points
    if alarms is not None and not alarms.empty:
        chart = chart + alt.Chart(alarms).mark_rule(color="#b23a48", strokeDash=[4, 3]).encode(
            x=_time_x("at"), tooltip=[alt.Tooltip("kind:N", title="event"),
                                      alt.Tooltip("message:N", title="note")]
        )
    return chart.properties(height=200)


def control_chart(chart: ControlChart, times: Sequence[object], title: str, factor: float
                  ) -> Layered:  # fmt: skip
    """EWMA (statistic with time-varying limits) or CUSUM (SH, SL against ±h·σ)."""
    rows = []
    for p in chart.points:
        t = times[p.index] if p.index < len(times) else None
        if chart.kind == "ewma":
            rows.append({"at": t, "value": p.value * factor, "statistic": p.statistic * factor,
                         "lower": p.lower * factor, "upper": p.upper * factor,
                         "signal": p.signal})  # fmt: skip
        else:
            rows.append({"at": t, "statistic": p.statistic * factor,
                         "low": -(p.statistic_low or 0.0) * factor,
                         "lower": -p.upper * factor, "upper": p.upper * factor,
                         "signal": p.signal})  # fmt: skip
    df = pd.DataFrame(rows)
    base = alt.Chart(df).encode(x=_time_x("at"))
    layers = [
        base.mark_line(color="#999", strokeDash=[4, 3]).encode(y=alt.Y("upper:Q", title=title)),
        base.mark_line(color="#999", strokeDash=[4, 3]).encode(y="lower:Q"),
        base.mark_line(color="#5b7fa6", point=True).encode(y="statistic:Q"),
        base.transform_filter("datum.signal")
        .mark_point(color="#b23a48", size=90, filled=True)
        .encode(
            y="statistic:Q", tooltip=[_time_tip("at"), alt.Tooltip("statistic:Q", format=".4g")]
        ),
    ]
    if chart.kind == "cusum":
        layers.insert(3, base.mark_line(color="#6a4c93", point=True).encode(y="low:Q"))
    return alt.layer(*layers).properties(height=200)


def history(df: pd.DataFrame, y: str, title: str) -> alt.Chart:
    """Readings over time coloured by verdict (a station's latest tests)."""
    return (
        alt.Chart(df)
        .mark_circle(size=28)
        .encode(
            x=_time_x("ended_at"),
            y=alt.Y(f"{y}:Q", title=title, scale=alt.Scale(zero=False)),
            color=alt.Color("verdict:N", scale=_VERDICT_COLOURS),
            tooltip=[
                _time_tip("ended_at"),
                "cycle",
                "program",
                "verdict",
                alt.Tooltip(f"{y}:Q", format=".4g", title=title),
            ],
        )
        .properties(height=220)
    )


def band(df: pd.DataFrame, title: str) -> Layered:
    """Hourly mean with min–max band (the long view, from the store's summaries)."""
    base = alt.Chart(df).encode(x=_time_x("bucket"))
    return alt.layer(
        base.mark_area(opacity=0.25, color="#5b7fa6").encode(
            y=alt.Y("min:Q", title=title), y2="max:Q"
        ),
        base.mark_line(color="#5b7fa6").encode(
            y="mean:Q", tooltip=[_time_tip("bucket"), "n", "mean", "min", "max"]
        ),
    ).properties(height=220)


def advice_curve(df: pd.DataFrame, target: float, current_s: float) -> Layered:
    """%GRR against test time with the target and the current test time."""
    line = (
        alt.Chart(df)
        .mark_line(point=True)
        .encode(
            x=alt.X("test_s:Q", title="test time [s]"),
            y=alt.Y("pct_grr:Q", title="%GRR of tolerance"),
            tooltip=[alt.Tooltip("test_s:Q", format=".2f", title="test time [s]"),
                     alt.Tooltip("pct_grr:Q", format=".1f", title="%GRR")],
        )
    )
    rules = pd.DataFrame([{"y": target, "what": f"target {target:g} %"}])
    target_rule = alt.Chart(rules).mark_rule(color="#4c9a5f", strokeDash=[5, 3]).encode(y="y:Q")
    now_rule = (
        alt.Chart(pd.DataFrame([{"x": current_s}])).mark_rule(color="#b23a48").encode(x="x:Q")
    )
    return alt.layer(line, target_rule, now_rule).properties(height=260)


#: ordinary series (groups, periods, stations): the Okabe–Ito colour-blind-safe palette
#: (Okabe & Ito 2008, "Color Universal Design"), blue and orange first, no red/green pair
SERIES_COLOURS = ["#0072B2", "#E69F00", "#56B4E9", "#CC79A7", "#009E73", "#F0E442",
                  "#D55E00", "#000000"]  # fmt: skip
#: limit kind (analytics.station.LIMIT_KINDS) → colour and dash: the reject limit solid
#: vermillion, the lower plausibility limit dotted grey
_LIMIT_STYLE: dict[str, tuple[str, list[int]]] = {
    "reject limit": ("#D55E00", [1, 0]),
    "lower plausibility limit (not a reject limit)": ("#8d8d8d", [2, 3]),
}


def station_leak(points: pd.DataFrame, band_df: pd.DataFrame, limits: pd.DataFrame,
                 events: pd.DataFrame, unit: str, height: int = 280,
                 calibrations: pd.DataFrame | None = None) -> Layered:
    """A station's leak rate over days: hourly min–max band and mean, the newest tests as
    dots by verdict, each limit as the step it was in force (the reject limit solid, the
    lower plausibility limit dotted and named as such), maintenance as vertical rules and
    calibrations (``ended_at``, ``outcome``, ``program``) as triangles along the bottom,
    vermillion when one failed."""
    title = f"leak rate [{unit}]"
    layers: list[alt.Chart] = []
    if not band_df.empty:  # each hour as a box from its lowest to its highest test
        base = alt.Chart(band_df).encode(x=_time_x("bucket"), x2="bucket_end:T")
        tips = [_time_tip("bucket"), alt.Tooltip("n:Q", title="tests"),
                alt.Tooltip("mean:Q", format=".3g", title="mean"),
                alt.Tooltip("min:Q", format=".3g", title="lowest"),
                alt.Tooltip("max:Q", format=".3g", title="highest")]
        layers += [
            base.mark_rect(opacity=0.2, color="#0072B2").encode(
                y=alt.Y("min:Q", title=title, scale=alt.Scale(zero=False)), y2="max:Q",
                tooltip=tips),
            base.mark_rule(color="#0072B2", strokeWidth=1.5).encode(y="mean:Q", tooltip=tips),
        ]
    if not points.empty:
        layers.append(
            alt.Chart(points).mark_circle(size=16, opacity=0.7).encode(
                x=_time_x("ended_at"), y=alt.Y("leak:Q", title=title),
                color=alt.Color("verdict:N", scale=_VERDICT_COLOURS, title="verdict",
                                legend=alt.Legend(orient="bottom")),
                tooltip=[_time_tip("ended_at"), alt.Tooltip("cycle:Q", title="cycle"),
                         alt.Tooltip("program:N", title="program"),
                         alt.Tooltip("verdict:N", title="verdict"),
                         alt.Tooltip("leak:Q", format=".3g", title=title)]))
    if not limits.empty:
        shown = [k for k in _LIMIT_STYLE if k in set(limits["what"])]
        layers.append(
            alt.Chart(limits).mark_rule(strokeWidth=2).encode(
                x=_time_x("start"), x2="end:T", y=alt.Y("value:Q", title=title),
                color=alt.Color("what:N", scale=alt.Scale(domain=shown, range=[
                    _LIMIT_STYLE[k][0] for k in shown]), title="limits",
                    legend=alt.Legend(labelLimit=320, orient="bottom")),
                strokeDash=alt.StrokeDash("what:N", scale=alt.Scale(
                    domain=shown, range=[_LIMIT_STYLE[k][1] for k in shown]), legend=None),
                tooltip=[alt.Tooltip("what:N", title="limit"),
                         alt.Tooltip("value:Q", format=".3g", title=unit)]))
    if not events.empty:
        layers.append(
            alt.Chart(events).mark_rule(color="#000000", strokeDash=[6, 3]).encode(
                x=_time_x("at"), tooltip=[_time_tip("at"), alt.Tooltip("kind:N", title="what"),
                                          alt.Tooltip("note:N", title="note")]))
    if calibrations is not None and not calibrations.empty:
        lows = [f[c].min() for f, c in ((band_df, "min"), (points, "leak"), (limits, "value"))
                if not f.empty and c in f]
        floor = float(min(lows)) if lows else 0.0  # along the bottom of what is drawn
        layers.append(
            alt.Chart(calibrations.assign(y=floor)).mark_point(
                shape="triangle-up", filled=True, size=30).encode(
                x=_time_x("ended_at"), y=alt.Y("y:Q", title=title),
                color=alt.condition("datum.outcome == 'FAILED'", alt.value("#D55E00"),
                                    alt.value("#555555")),
                tooltip=[_time_tip("ended_at"), alt.Tooltip("outcome:N", title="calibration"),
                         alt.Tooltip("program:N", title="program")]))
    if not layers:
        layers.append(alt.Chart(pd.DataFrame({"x": []})).mark_point())
    return alt.layer(*layers).resolve_scale(color="independent").properties(height=height)


def yield_periods(df: pd.DataFrame, *, measure: str, domain: tuple[float, float],
                  target: float | None, colour: str | None = None, x: str = "period",
                  height: int = 240) -> tuple[Layered, alt.Chart]:
    """Yield per period (day, week or shift) with its volume: points sized by volume on a
    fixed-floor axis, the target as a dashed line, and the volume as bars below, so a period
    with a handful of parts is seen to be one. ``df``: ``period``, ``yield``, ``total``,
    ``share`` and optionally the ``colour`` column (e.g. the shift). Two charts (yield, then
    volume), since a concatenated chart does not stretch to the page's width."""
    order = list(dict.fromkeys(df[x]))
    x_enc = alt.X(f"{x}:O", sort=order, title=None,
                  axis=alt.Axis(labelAngle=0 if len(order) <= 8 else -40))
    # Streamlit fits the whole chart, legends included, into its height: one legend, on top
    colour_enc = (alt.Color(f"{colour}:N", scale=alt.Scale(range=SERIES_COLOURS), title=None,
                            legend=alt.Legend(orient="top"))
                  if colour else alt.value(SERIES_COLOURS[0]))
    bar_colour = (alt.Color(f"{colour}:N", scale=alt.Scale(range=SERIES_COLOURS), legend=None)
                  if colour else alt.value(SERIES_COLOURS[0]))
    tips = [alt.Tooltip("period:N", title="period"),
            alt.Tooltip("yield:Q", format=".2%", title=measure),
            alt.Tooltip("total:Q", format=",", title="volume"),
            alt.Tooltip("share:Q", format=".1%", title="share of volume")]
    base = alt.Chart(df).encode(x=x_enc)
    if colour:  # the same period's groups side by side, not on top of each other
        base = base.encode(xOffset=alt.XOffset(f"{colour}:N"))
    line = base.mark_line(strokeWidth=1, opacity=0.6).encode(
        y=alt.Y("yield:Q", title=f"{measure} [%]", axis=alt.Axis(format="%"),
                scale=alt.Scale(domain=list(domain), clamp=True)),
        color=colour_enc)
    points = base.mark_circle(opacity=0.9).encode(
        y="yield:Q", color=colour_enc,
        size=alt.Size("total:Q", title="volume", scale=alt.Scale(range=[15, 400]),
                      legend=None),
        tooltip=tips)
    layers: list[alt.Chart] = [line, points]
    if target is not None:
        layers.append(alt.Chart(pd.DataFrame({"y": [target], "what": [f"target {target:.1%}"]}))
                      .mark_rule(color="#000000", strokeDash=[6, 4])
                      .encode(y="y:Q", tooltip=[alt.Tooltip("what:N", title="target")]))
    top = alt.layer(*layers).properties(height=height)
    bars = base.mark_bar(opacity=0.8).encode(
        y=alt.Y("total:Q", title="volume"), color=bar_colour, tooltip=tips,
    ).properties(height=140)
    return top, bars
