"""Yield: first-pass and final yield by station, line, program or shift; comparisons of days,
weeks and shifts against a target, weighted by volume; trend; reject Pareto. ``?print=1`` is
its print view."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import pandas as pd
import streamlit as st

from analytics import counts_to_shifts, pareto_from_counts, yield_from_counts
from analytics.compare import MEASURES, families, family_programs, good_total, yield_axis
from dashboard import charts, data, station_data
from dashboard.common import page, pick, time_range
from dashboard.export import downloads
from dashboard.printing import hide_for_print, print_link, printing, show_table
from dashboard.yield_compare import COMPARISONS, compare_section

_GROUPS = {"Station": "station", "Line": "line", "Program": "program", "Shift": "shift"}
_COUNT_COLS = ("n", "parts", "first_pass", "final_pass", "tests", "no_part_id")
_RANGES = ("Last hour", "Last 8 hours", "Last 24 hours", "Last 7 days", "Last 30 days", "Today",
           "Current shift", "Everything")
#: a plant setting the gateway config has no key for yet: the sidebar's number starts here
_DEFAULT_TARGET_PCT = 98.0


def _query(name: str, allowed: Sequence[str], default: str) -> str:
    """A choice carried by the link (print view), if it is one of ``allowed``."""
    value = st.query_params.get(name)
    return value if value is not None and value in allowed else default


def _seed(key: str, name: str, allowed: Sequence[str]) -> None:
    """Start widget ``key`` at the link's ``name=`` value when that is one of ``allowed``."""
    value = st.query_params.get(name)
    if value in allowed and key not in st.session_state:
        st.session_state[key] = value


def _target_from_link() -> float:
    try:
        value = float(st.query_params.get("target", _DEFAULT_TARGET_PCT))
    except ValueError:
        return _DEFAULT_TARGET_PCT
    return value if 50.0 <= value <= 100.0 else _DEFAULT_TARGET_PCT


p = page("Yield")
paper = printing()
if paper:
    hide_for_print()
else:
    st.page_link("views/shift.py", label="Shift report: one page per line, to print and sign",
                 icon=":material/description:")
c1, c2, c3, c4 = st.columns(4)
with c1:
    since, until = time_range(p, "yield_range", _query("range", _RANGES, "Last 24 hours"))
lines = sorted(str(x) for x in p.stations["line"].unique())
stations = [str(s) for s in p.stations["station"]]
progs = sorted(str(x) for x in data.programs(p.url)["program"].unique())
fam_of = families(station_data.program_families(p.url))
fams = sorted(set(fam_of.values()))
for key, name, allowed in (("yield_group", "group", list(_GROUPS)), ("yield_line", "line", lines),
                           ("yield_station", "station", stations),
                           ("yield_program", "program", progs), ("yield_family", "family", fams),
                           ("yield_measure", "measure", list(MEASURES))):
    _seed(key, name, allowed)
st.session_state.setdefault("yield_target", _target_from_link())
with c2:
    group_label = st.selectbox("Group by", list(_GROUPS), key="yield_group")
with c3:
    line = pick("Line", lines, "yield_line")
with c4:
    station = pick("Station", stations, "yield_station")
d1, d2, d3 = st.columns(3)
with d1:
    program = pick("Program", progs, "yield_program")
with d2:
    family = pick("Part family", fams, "yield_family")
with d3:
    measure = st.selectbox("Yield measure", list(MEASURES), format_func=lambda m: MEASURES[m],
                           key="yield_measure",
                           help="first-pass yield counts parts (a part's first test decides); "
                                "test yield counts every test with a verdict")
with st.sidebar:  # a plant figure, kept while the viewer changes the selection
    target_pct = float(st.number_input(
        "Target yield [%]", min_value=50.0, max_value=100.0, step=0.5, format="%.1f",
        key="yield_target",
        help="the plant's yield target (the gateway config has no key for it yet), drawn as "
             "a dashed line on the comparisons",
    ))  # fmt: skip
measure = str(measure or "first_pass")
if fam_of and all(f == prog for prog, f in fam_of.items()):
    st.caption("The results carry no part family (set `part_family` per program in the gateway "
               "config's `[parameters]`), so each program is a family of its own.")
group = _GROUPS[group_label]
filters: dict[str, Any] = {"line": line, "station": station, "program": program}
only: list[str] | None = None
if family is not None:
    only = [x for x in family_programs(fam_of, family) if program in (None, x)]
    filters["program"] = None
if only == []:
    st.info(f"Program {program} is not in part family {family}.")
    st.stop()


def counts(kind: str, by: Sequence[str] = (), bucket: str | None = None) -> pd.DataFrame:
    """The store's verdict or first-pass counts of the selection (a part family is several
    programs: counted per program, then the family's programs summed)."""
    fn = data.verdict_counts if kind == "verdict" else data.first_pass_counts
    if only is None or len(only) == 1:
        chosen = {**filters, **({"program": only[0]} if only else {})}
        return fn(p.url, since, until, by=tuple(by), bucket=bucket, **chosen)
    wide = fn(p.url, since, until, by=tuple(dict.fromkeys((*by, "program"))), bucket=bucket,
              **filters)
    wide = wide[wide["program"].isin(only)]
    if "program" in by:
        return wide.reset_index(drop=True)
    cols = [c for c in _COUNT_COLS if c in wide.columns]
    keys = [c for c in wide.columns if c not in cols and c != "program"]
    if not keys:
        return pd.DataFrame([wide[cols].sum()])
    return wide.groupby(keys, as_index=False, dropna=False)[cols].sum()


if group == "shift":
    vc_s, exact_v = counts_to_shifts(counts("verdict", bucket="hour"), p.calendar)
    fp_s, exact_f = counts_to_shifts(counts("first_pass", bucket="hour"), p.calendar)
    for df in (vc_s, fp_s):
        df["shift"] = df["shift_date"].astype(str) + " " + df["shift"].astype(str)
    table = yield_from_counts(
        vc_s.drop(columns="shift_date"), fp_s.drop(columns="shift_date"), by=["shift"]
    )
    if not (exact_v and exact_f):
        st.caption("Some hours straddle a shift change: counts near it may sit in the next shift.")
else:
    table = yield_from_counts(counts("verdict", (group,)), counts("first_pass", (group,)),
                              by=[group])

if table.empty or int(table["tests"].sum()) == 0:
    st.info("No tests in this range and selection.")
    st.stop()

overall = yield_from_counts(counts("verdict"), counts("first_pass"))
row = overall.iloc[0]
chosen_range = str(st.session_state.get("yield_range", "Last 24 hours"))
span = "all time" if since is None else f"{p.local(since)} – {p.local(until)}"
picked = [f"{k} {v}" for k, v in (("line", line), ("station", station), ("program", program),
                                   ("part family", family)) if v]
st.caption(f"{chosen_range} ({span}, {p.settings.timezone}) · "
           f"{', '.join(picked) if picked else 'all stations and programs'}")
m1, m2, m3, m4 = st.columns(4)


def _pct(value: Any) -> str:
    return "–" if value is None or pd.isna(value) else f"{float(value):.1%}"


m1.metric("Tests", f"{int(row['tests']):,}")
m2.metric("First-pass yield", _pct(row.get("first_pass_yield")))
m3.metric("Final yield", _pct(row.get("final_yield")))
m4.metric("Test yield", _pct(row.get("test_yield")), help="passed tests / tests with a verdict")
if int(row.get("no_part_id", 0) or 0):
    st.caption(
        f"{int(row['no_part_id'])} test(s) carry no part id and count only in the test yield."
    )

_LABELS = {"tests": "Tests", "aborted": "Aborted", "passed_tests": "Passed tests",
           "test_yield": "Test yield", "parts": "Parts", "first_pass": "Passed first time",
           "final_pass": "Passed in the end", "part_tests": "Tests of these parts",
           "no_part_id": "Tests without part id", "first_pass_yield": "First-pass yield",
           "final_yield": "Final yield"}  # fmt: skip
shown_table = table.rename(columns={group: group_label, **_LABELS})
if paper:  # the headline columns only: twelve do not fit a portrait page
    narrow = [c for c in (group_label, "Tests", "Aborted", "Parts", "First-pass yield",
                          "Final yield", "Test yield") if c in shown_table]
    show_table(shown_table[narrow].assign(**{c: shown_table[c].map(_pct) for c in
                                             ("Test yield", "First-pass yield", "Final yield")
                                             if c in shown_table}), "yield_table")
else:
    st.dataframe(
        shown_table, hide_index=True, width="stretch", key="yield_table",
        column_config={c: st.column_config.NumberColumn(c, format="percent")
                       for c in ("Test yield", "First-pass yield", "Final yield")},
    )  # fmt: skip
    downloads(shown_table, f"leakfleet-yield-by-{group}", p.settings.timezone, "yield_table")

st.subheader("Compare")
compare_choice = str(st.selectbox(
    "Compare", list(COMPARISONS), key="yield_compare",
    index=list(COMPARISONS).index(_query("compare", list(COMPARISONS), "Day by day")),
))  # fmt: skip
if paper:
    st.caption(f"{compare_choice} · {MEASURES[measure]}")
if since is not None and until is not None and (until - since).days < 2:
    st.caption("Choose Last 7 days or Last 30 days above to compare days, weeks and shifts.")
hourly = good_total(counts("first_pass" if measure == "first_pass" else "verdict",
                           bucket="hour"), measure, keys=("bucket",))  # type: ignore[arg-type]
compare_section(hourly, p.calendar, measure=MEASURES[measure].split(" (")[0],
                target=target_pct / 100.0, choice=compare_choice, height=180 if paper else 300)

if not paper:
    st.subheader("Trend")
    trend_by = None if group == "shift" else group
    trend_vc = counts("verdict", (trend_by,) if trend_by else (), bucket="hour")
    trend_fp = counts("first_pass", (trend_by,) if trend_by else (), bucket="hour")
    span_h = (until - since).total_seconds() / 3600 if since and until else 1e9
    if span_h > 48:
        keys = ["day", *([trend_by] if trend_by else [])]
        tv = data.to_local_days(trend_vc, p.settings.timezone, ["n"])
        tf = data.to_local_days(
            trend_fp, p.settings.timezone,
            [c for c in ("parts", "first_pass", "final_pass", "tests", "no_part_id")
             if c in trend_fp],
        )  # fmt: skip
        x = "day"
    else:
        keys = ["bucket", *([trend_by] if trend_by else [])]
        tv = trend_vc.assign(
            bucket=trend_vc["bucket"].dt.tz_convert(p.settings.timezone).dt.strftime("%m-%d %H:00")
        ) if not trend_vc.empty else trend_vc  # fmt: skip
        tf = trend_fp.assign(
            bucket=trend_fp["bucket"].dt.tz_convert(p.settings.timezone).dt.strftime("%m-%d %H:00")
        ) if not trend_fp.empty else trend_fp  # fmt: skip
        x = "bucket"
    trend = yield_from_counts(tv, tf, by=keys)
    trend["yield"] = trend["first_pass_yield"].fillna(trend["test_yield"])
    st.altair_chart(
        charts.yield_trend(trend, x, "yield", trend_by, "first-pass yield",
                           domain=yield_axis(trend["yield"], target_pct / 100.0)),
        width="stretch",
    )
    st.altair_chart(
        charts.verdict_trend(tv.groupby([x, "verdict"], as_index=False)[["n"]].sum(), x),
        width="stretch",
    )

st.subheader("Rejects, Pareto")
by_cat = counts("verdict", ("station", "program"))
rejects = by_cat[by_cat["verdict"].isin(["reject", "gross"])].copy()
if rejects.empty:
    st.success("No rejects in this range.")
else:
    left, right = st.columns(2)
    rejects["where"] = rejects["station"] + " · " + rejects["program"]
    with left:
        st.altair_chart(
            charts.pareto(pareto_from_counts(rejects, column="where"), "station · program"),
            width="stretch",
        )
    with right:  # counted in the store (its reason summaries), however long the range
        by_reason = counts("verdict", ("reason",))
        report = pareto_from_counts(by_reason, column="reason", verdicts=("reject", "gross"))
        st.altair_chart(charts.pareto(report, "reason"), width="stretch")

if not paper:
    link: dict[str, str] = {"compare": compare_choice, "target": f"{target_pct:g}",
                            "group": group_label, "measure": measure}
    for name, value in (("line", line), ("station", station), ("program", program),
                        ("family", family)):
        if value:
            link[name] = value
    if chosen_range in _RANGES:
        link["range"] = chosen_range
    print_link("views/yields.py", link)
else:
    st.caption("The print view leaves out the hourly trend; the interactive page has it.")
