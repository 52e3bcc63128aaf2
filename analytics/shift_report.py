"""Shift report: one shift's figures per line, for the shift handover and the auditor's file.

Per line: first-pass and final yield, rejects by reason (Pareto), the share of passes that
needed a retest, each station's calibration state, the alarms raised in the shift, and the
leak standards that are due; beside them the previous shift's figures and the targets, and
the journal's alarm states at the shift's end (``analytics.shift_compare``). Everything is
computed by the existing analytics (yield, retest, calibration health, standards); this module
only picks one shift out of them.

Which shift a figure belongs to follows the analytics' own conventions, so shift reports add
up: a part belongs to the shift of its *first* test (a part first rejected in the late shift
and passed in the night shift is a late-shift part with a failed first test), while a pass
that needed a retest is counted in the shift where that pass ran. Final yield is the parts'
state at the end of the shift. The caller passes history before the shift (``results`` from
some days earlier) so that retests of older parts are recognised as retests, and so that the
retest alarm and the calibration charts have a baseline.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import date, datetime, timedelta
from typing import Any, Literal

import pandas as pd

from analytics._result import ResultMixin
from analytics.audit import (
    LeakStandard,
    StandardStatus,
    flag_overdue_calibrations,
    retest_analysis,
    standards_due,
)
from analytics.drift import HealthConfig, calibration_health
from analytics.shift_compare import (
    Comparison,
    JournalAlarm,
    alarm_states,
    compare_shift,
    journal_alarms,
    previous_window,
)
from analytics.shifts import ShiftCalendar, ShiftWindow
from analytics.yields import ParetoReport, YieldRow, pareto, yield_report

__all__ = [
    "LineShift",
    "RetestShare",
    "ShiftAlarm",
    "ShiftReport",
    "StationShift",
    "shift_report",
]

AlarmSource = Literal["calibration", "retests", "standard", "status"]
# "not judged": the newest calibration came without a pass/fail (a station that sends none)
CalibrationState = Literal["ok", "failed", "overdue standard", "no calibration", "not judged"]
_ALARM_STATES = ("fault", "offline")


@dataclass(frozen=True, slots=True)
class ShiftAlarm(ResultMixin):
    """Something that needs a look, raised during the shift."""

    station: str
    at: datetime | None
    source: AlarmSource
    kind: str
    message: str


@dataclass(frozen=True, slots=True)
class StationShift(ResultMixin):
    """A station's tests in the shift and its calibration state at the shift's end."""

    station: str
    tests: int
    state_at_end: str | None
    calibration_state: CalibrationState
    calibrations_in_shift: int
    failed_calibrations_in_shift: int
    last_calibration_at: datetime | None
    last_calibration_program: str | None
    last_calibration_passed: bool | None
    master_loss_pa: float | None
    standard_loss_pa: float | None
    ratio: float | None
    sensitivity: float | None
    standard_serial: str | None
    standard_overdue: bool | None
    drift: str | None
    # the journal's alarms at the shift's end: "active", "acknowledged" or "clear" (None when
    # the store keeps no alarm states), and how many were open
    alarm_state: str | None = None
    open_alarms: int | None = None


@dataclass(frozen=True, slots=True)
class RetestShare(ResultMixin):
    """Passes in the shift and how many of them needed a retest (parts with ids)."""

    passes: int
    passed_after_retest: int
    share: float | None
    after_two_or_more_rejects: list[str]
    marginal: list[str]
    parts: list[dict[str, Any]]


@dataclass(frozen=True, slots=True)
class LineShift(ResultMixin):
    """One line's section of the report."""

    line: str
    has_data: bool
    tests: int
    aborted: int
    tests_without_part_id: int
    parts: int
    first_pass: int
    final_pass: int
    first_pass_yield: float | None
    final_yield: float | None
    test_yield: float | None
    basis: str
    by_station: list[YieldRow]
    rejects: ParetoReport
    retests: RetestShare
    stations: list[StationShift]
    alarms: list[ShiftAlarm]
    standards: list[StandardStatus]
    note: str
    journal_alarms: list[JournalAlarm] = field(default_factory=list)
    comparison: list[Comparison] = field(default_factory=list)


@dataclass(frozen=True, slots=True)
class ShiftReport(ResultMixin):
    shift_date: date
    shift: str
    timezone: str
    start: datetime
    end: datetime
    hours: float
    standards_judged_on: date
    within_days: int
    history_since: datetime
    has_data: bool
    tests: int
    lines: list[LineShift]
    other_standards: list[StandardStatus] = field(default_factory=list)
    note: str = ""
    site: str = ""
    previous_shift: str | None = None  # "<date> <shift>" the comparison is with
    targets: dict[str, float] = field(default_factory=dict)
    alarms_known: bool = False  # the journal's alarm states were read
    fleet_alarms: list[JournalAlarm] = field(default_factory=list)  # alarms of no station


def _in(ts: pd.Series, window: ShiftWindow) -> pd.Series:
    t = pd.to_datetime(ts, utc=True)
    return (t >= window.start) & (t < window.end)


def _no_id(df: pd.DataFrame) -> pd.Series:
    ids = df["part_id"].astype("string")
    return ids.isna() | (ids.str.strip() == "")


def _float(value: Any) -> float | None:
    return None if value is None or pd.isna(value) else float(value)


def _station_lines(
    stations: pd.DataFrame | None, results: pd.DataFrame, calibrations: pd.DataFrame
) -> dict[str, str]:
    """station → line, the latest record winning (the store's ``stations()`` first)."""
    out: dict[str, str] = {}
    for frame in (calibrations, results):
        if frame.empty or "line" not in frame:
            continue
        ordered = frame.sort_values("ended_at", kind="mergesort")
        out |= dict(zip(ordered["station"].astype(str), ordered["line"].astype(str), strict=True))
    if stations is not None and not stations.empty:
        for s, ln in zip(stations["station"].astype(str), stations["line"], strict=True):
            if ln is not None and not pd.isna(ln):
                out.setdefault(s, str(ln))
    return out


def shift_report(
    window: ShiftWindow,
    calendar: ShiftCalendar,
    results: pd.DataFrame,
    calibrations: pd.DataFrame,
    statuses: pd.DataFrame | None = None,
    stations: pd.DataFrame | None = None,
    standards: Sequence[LeakStandard] = (),
    *,
    history_since: datetime | None = None,
    within_days: int = 30,
    guard_band: float | None = None,
    health: HealthConfig | None = None,
    line: str | None = None,
    site: str = "",
    alarms: Iterable[Any] | None = None,
    targets: Mapping[str, float] | None = None,
    previous: bool = True,
    previous_results: pd.DataFrame | None = None,
) -> ShiftReport:
    """The report of one shift (``window``), one section per line.

    ``results`` and ``calibrations`` may start before the shift (history, see the module
    docstring) and are cut at the shift's end; ``statuses`` are state changes up to the end
    (the latest one before the shift tells the state a quiet station was in); ``stations`` is
    the store's station list, so a line that did not test in the shift still gets a section.
    ``line`` restricts the report to one line. ``alarms`` are the journal's alarm
    occurrences (``Logbook.alarms``; None when the store keeps none); ``targets`` maps
    ``first_pass_yield`` / ``final_yield`` to fractions; ``previous`` adds the comparison with
    the shift before (its figures from ``previous_results``, else from ``results``).
    """
    key = f"{window.shift_date.isoformat()} {window.shift}"
    end = pd.Timestamp(window.end)
    res = results[pd.to_datetime(results["ended_at"], utc=True) < end] if len(results) else results
    cals = (
        calibrations[pd.to_datetime(calibrations["ended_at"], utc=True) < end]
        if len(calibrations)
        else calibrations
    )
    line_of = _station_lines(stations, res, cals)
    shift_res = res[_in(res["ended_at"], window)] if len(res) else res
    lines = sorted({*line_of.values(), *(shift_res["line"].astype(str) if len(shift_res) else [])})
    if line is not None:
        lines = [ln for ln in lines if ln == line] or [line]

    yields: dict[str, YieldRow] = {}
    per_station: dict[str, list[YieldRow]] = {}
    retested: list[dict[str, Any]] = []
    retest_groups: dict[str, dict[str, Any]] = {}
    retest_alarms: list[Any] = []
    if len(res):
        # only the tests that can bear on this shift: every test of a part tested in it (its
        # earlier tests decide whether it is this shift's part), and its tests without a part
        # id; the figures of the other shifts in the history are not wanted here
        touched = _in(res["ended_at"], window)
        mine = res["part_id"].isin(res.loc[touched, "part_id"].dropna().unique())
        focus = res[mine | (touched & _no_id(res))]
        y = yield_report(focus, by=("line", "shift"), calendar=calendar)
        yields = {r.group["line"]: r for r in y.rows if r.group["shift"] == key}
        ys = yield_report(focus, by=("line", "station", "shift"), calendar=calendar)
        for r in ys.rows:
            if r.group["shift"] == key:
                per_station.setdefault(r.group["line"], []).append(r)
        rt = retest_analysis(
            focus, by=("line", "shift"), calendar=calendar, guard_band=guard_band,
            alarm_period="shift",
        )  # fmt: skip
        retest_groups = {g["line"]: g for g in rt.by_group if g["shift"] == key}
        retested = [r for r in rt.retested_passes if r["shift"] == key]
        retest_alarms = [a for a in rt.alarms if a.period == key]

    flagged = (
        flag_overdue_calibrations(cals, standards, calendar.timezone)
        if len(cals)
        else cals.assign(standard_serial=None, standard_overdue=False)
    )
    cal_health = calibration_health(cals, health) if len(cals) else None
    health_alarms = cal_health.alarms if cal_health else []
    projections = (
        {(s.station, s.program): s.projection for s in cal_health.series} if cal_health else {}
    )
    judged_on = (window.end - timedelta(microseconds=1)).astimezone(calendar.tz).date()
    standard_status = {s.serial: s for s in standards_due(standards, judged_on, within_days)}
    status_frame = statuses if statuses is not None else pd.DataFrame(columns=["station", "at"])

    sections = []
    for ln in lines:
        names = sorted(
            {s for s, station_line in line_of.items() if station_line == ln}
            | set(shift_res.loc[shift_res["line"].astype(str) == ln, "station"].astype(str)
                  if len(shift_res) else [])
        )  # fmt: skip
        sections.append(
            _line_section(
                ln, names, window,
                shift_res[shift_res["line"].astype(str) == ln] if len(shift_res) else shift_res,
                yields.get(ln), per_station.get(ln, []), retest_groups.get(ln),
                [r for r in retested if r["line"] == ln],
                [a for a in retest_alarms if a.station in names],
                flagged, health_alarms, projections, status_frame,
                [standard_status[s.serial] for s in standards if s.station in names],
            )
        )  # fmt: skip
    assigned = {s for sec in sections for s in (st.station for st in sec.stations)}
    other = (
        [standard_status[s.serial] for s in standards if s.station not in assigned]
        if line is None
        else []
    )
    total = sum(s.tests for s in sections)
    note = (
        ""
        if total
        else f"no test results in the {window.shift} shift of {window.shift_date.isoformat()}"
        + ("" if lines else " and no stations known to the store")
    )
    listed = journal_alarms(alarms, window) if alarms is not None else []
    states = alarm_states(listed)
    before = previous_window(calendar, window) if previous else None
    earlier = {}
    if before is not None:
        prior = shift_report(before, calendar,
                             results if previous_results is None else previous_results,
                             calibrations, statuses, stations,
                             history_since=history_since, guard_band=guard_band, health=health,
                             line=line, previous=False)  # fmt: skip
        earlier = {sec.line: _figures(sec) for sec in prior.lines}
    sections = [
        replace(
            sec,
            stations=[
                replace(st, alarm_state=states.get(st.station, ("clear", 0))[0],
                        open_alarms=states.get(st.station, ("clear", 0))[1])
                if alarms is not None else st
                for st in sec.stations
            ],
            journal_alarms=[a for a in listed if a.station in {x.station for x in sec.stations}],
            comparison=compare_shift(_figures(sec), earlier.get(sec.line) if before else None,
                                     targets),
        )
        for sec in sections
    ]  # fmt: skip
    return ShiftReport(
        site=site,
        previous_shift=None if before is None
        else f"{before.shift_date.isoformat()} {before.shift}",
        targets=dict(targets or {}),
        alarms_known=alarms is not None,
        fleet_alarms=[a for a in listed if a.station is None],
        shift_date=window.shift_date,
        shift=window.shift,
        timezone=calendar.timezone,
        start=window.start,
        end=window.end,
        hours=window.hours,
        standards_judged_on=judged_on,
        within_days=within_days,
        history_since=history_since or window.start,
        has_data=bool(total),
        tests=total,
        lines=sections,
        other_standards=sorted(other, key=lambda x: (x.days_left, x.serial)),
        note=note,
    )


def _figures(sec: LineShift) -> dict[str, float | int | None]:
    """A line's figures that ``compare_shift`` sets beside the previous shift's."""
    return {"first_pass_yield": sec.first_pass_yield, "final_yield": sec.final_yield,
            "retest_share": sec.retests.share, "tests": sec.tests}


def _line_section(
    line: str,
    stations: list[str],
    window: ShiftWindow,
    tests: pd.DataFrame,
    row: YieldRow | None,
    by_station: list[YieldRow],
    group: dict[str, Any] | None,
    retested: list[dict[str, Any]],
    retest_alarms: list[Any],
    flagged: pd.DataFrame,
    health_alarms: list[Any],
    projections: dict[tuple[str, str], Any],
    statuses: pd.DataFrame,
    standards: list[StandardStatus],
) -> LineShift:
    rejects = (
        pareto(tests, "reason") if len(tests) else ParetoReport(column="reason", total=0, rows=[])
    )
    passes = int(group["passes"]) if group else 0
    after = int(group["passed_after_retest"]) if group else 0
    retests = RetestShare(
        passes=passes,
        passed_after_retest=after,
        share=after / passes if passes else None,
        after_two_or_more_rejects=sorted(
            r["part_id"] for r in retested if r["rejects_before"] >= 2
        ),
        marginal=sorted(r["part_id"] for r in retested if r["marginal"]),
        parts=[
            {k: r[k] for k in ("part_id", "station", "ended_at", "leak_rate_sccm",
                               "rejects_before", "marginal")}
            for r in retested
        ],
    )  # fmt: skip
    alarms: list[ShiftAlarm] = []
    for a in health_alarms:
        if a.station in stations and a.at is not None and window.start <= a.at < window.end:
            alarms.append(ShiftAlarm(a.station, a.at, "calibration", a.kind, a.message))
    for a in retest_alarms:
        alarms.append(ShiftAlarm(a.station, None, "retests", "retest share", a.message))
    station_rows = []
    for name in stations:
        mine = flagged[flagged["station"].astype(str) == name] if len(flagged) else flagged
        mine = mine.sort_values("ended_at", kind="mergesort") if len(mine) else mine
        during = mine[_in(mine["ended_at"], window)] if len(mine) else mine
        for r in (
            during[during["standard_overdue"].astype("boolean").fillna(False).astype(bool)]
            .to_dict("records")
            if len(during)
            else []
        ):
            alarms.append(
                ShiftAlarm(
                    name, pd.Timestamp(r["ended_at"]).to_pydatetime(), "standard",
                    "overdue standard",
                    f"calibration of {r['program']} ran with leak standard "
                    f"{r['standard_serial']} past its due date",
                )
            )  # fmt: skip
        st = statuses[statuses["station"].astype(str) == name] if len(statuses) else statuses
        st = st.sort_values("at", kind="mergesort") if len(st) else st
        for r in st[_in(st["at"], window)].to_dict("records") if len(st) else []:
            if str(r["state"]) in _ALARM_STATES:
                detail = str(r.get("detail") or "")
                alarms.append(
                    ShiftAlarm(
                        name, pd.Timestamp(r["at"]).to_pydatetime(), "status", str(r["state"]),
                        f"station {r['state']}" + (f": {detail}" if detail else ""),
                    )
                )  # fmt: skip
        ended = st[pd.to_datetime(st["at"], utc=True) < window.end] if len(st) else st
        last = mine.iloc[-1] if len(mine) else None
        if last is None:
            cal_state: CalibrationState = "no calibration"
        elif pd.isna(last["passed"]):
            cal_state = "not judged"
        elif not bool(last["passed"]):
            cal_state = "failed"
        elif not pd.isna(last["standard_overdue"]) and bool(last["standard_overdue"]):
            cal_state = "overdue standard"
        else:
            cal_state = "ok"
        proj = projections.get((name, str(last["program"]))) if last is not None else None
        station_rows.append(
            StationShift(
                station=name,
                tests=int((tests["station"].astype(str) == name).sum()) if len(tests) else 0,
                state_at_end=str(ended["state"].iloc[-1]) if len(ended) else None,
                calibration_state=cal_state,
                calibrations_in_shift=len(during),
                failed_calibrations_in_shift=int((~during["passed"].astype("boolean")).fillna(False).sum())
                if len(during)
                else 0,
                last_calibration_at=None
                if last is None
                else pd.Timestamp(last["ended_at"]).to_pydatetime(),
                last_calibration_program=None if last is None else str(last["program"]),
                last_calibration_passed=None
                if last is None or pd.isna(last["passed"])
                else bool(last["passed"]),
                master_loss_pa=None if last is None else _float(last["master_loss_pa"]),
                standard_loss_pa=None if last is None else _float(last["standard_loss_pa"]),
                ratio=None if last is None else _float(last["ratio"]),
                sensitivity=None if last is None else _float(last["sensitivity"]),
                standard_serial=None if last is None else last["standard_serial"],
                standard_overdue=None
                if last is None or last["standard_serial"] is None
                or pd.isna(last["standard_overdue"])
                else bool(last["standard_overdue"]),
                drift=None if proj is None else proj.status,
            )
        )
    epoch = window.start
    alarms.sort(key=lambda a: (a.at or epoch, a.station, a.source))
    no_id = int(_no_id(tests).sum()) if len(tests) else 0
    notes = []
    if not len(tests):
        notes.append("no tests in this shift")
    elif row is not None and row.basis in ("test", "mixed"):
        notes.append(
            f"{no_id} test(s) without a part id count as single-test parts "
            "(their retests cannot be recognised)"
        )
    return LineShift(
        line=line,
        has_data=bool(len(tests)),
        tests=len(tests),
        aborted=int((tests["verdict"].astype(str) == "aborted").sum()) if len(tests) else 0,
        tests_without_part_id=no_id,
        parts=row.parts if row else 0,
        first_pass=row.first_pass if row else 0,
        final_pass=row.final_pass if row else 0,
        first_pass_yield=row.first_pass_yield if row else None,
        final_yield=row.final_yield if row else None,
        test_yield=row.test_yield if row else None,
        basis=row.basis if row else "none",
        by_station=by_station,
        rejects=rejects,
        retests=retests,
        stations=station_rows,
        alarms=alarms,
        standards=sorted(standards, key=lambda x: (x.days_left, x.serial)),
        note="; ".join(notes),
    )
