"""Audit and traceability: part history, retest-until-pass, leak-standard due dates.

What an auditor or a customer complaint asks: every test of this part and the calibration that
was in force; which parts only passed on a retest (and after how many rejects); which passes
sat in the guard band just after a reject; whether a station's retest share jumped; whether
the leak standard a calibration used was still within its certificate.

The calibration in force for a test is the latest calibration of the same station and program
that ended at or before the test (the result's ``calibration_ref`` is shown as well when the
station reported one).
"""

from __future__ import annotations

import calendar as _calendar
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import date, datetime
from typing import Any, Literal

import pandas as pd
from scipy import stats

from analytics._result import ResultMixin
from analytics.drift import DriftProjection, project_drift
from analytics.shifts import ShiftCalendar

__all__ = [
    "LeakStandard",
    "PartHistory",
    "PartTest",
    "RetestAlarm",
    "RetestReport",
    "StandardStatus",
    "add_months",
    "flag_overdue_calibrations",
    "part_history",
    "retest_analysis",
    "standard_drift",
    "standards_due",
]


# ----------------------------------------------------------------------------- part history


@dataclass(frozen=True, slots=True)
class PartTest(ResultMixin):
    ended_at: datetime
    station: str
    line: str
    program: str
    cycle: int
    verdict: str
    leak_rate_sccm: float
    reject_limit_sccm: float
    reason: str
    calibration_ref: str | None
    calibration_at: datetime | None
    master_loss_pa: float | None
    standard_loss_pa: float | None
    calibration_passed: bool | None


@dataclass(frozen=True, slots=True)
class PartHistory(ResultMixin):
    part_id: str
    tests: list[PartTest]
    final_verdict: str | None
    rejects_before_pass: int | None
    stations: list[str]
    note: str


def _opt(value: Any) -> Any:
    return None if value is None or (not isinstance(value, str) and pd.isna(value)) else value


def _attach_calibrations(results: pd.DataFrame, calibrations: pd.DataFrame) -> pd.DataFrame:
    """Each result with the latest calibration of its station/program at or before it."""
    res = results.copy()
    res["ended_at"] = pd.to_datetime(res["ended_at"], utc=True)
    res = res.sort_values("ended_at", kind="mergesort").reset_index(drop=True)
    cal_cols = ["master_loss_pa", "standard_loss_pa", "passed"]
    if calibrations is None or calibrations.empty:
        for c in [*cal_cols, "calibration_at"]:
            res[c] = None
        return res
    cal = calibrations[["station", "program", "ended_at", *cal_cols]].copy()
    cal["ended_at"] = pd.to_datetime(cal["ended_at"], utc=True)
    cal = cal.rename(columns={"ended_at": "calibration_at", "passed": "calibration_passed"})
    cal = cal.sort_values("calibration_at", kind="mergesort")
    res["station"] = res["station"].astype(str)
    res["program"] = res["program"].astype(str)
    cal["station"] = cal["station"].astype(str)
    cal["program"] = cal["program"].astype(str)
    merged = pd.merge_asof(
        res,
        cal,
        left_on="ended_at",
        right_on="calibration_at",
        by=["station", "program"],
        direction="backward",
    )
    return merged


def part_history(
    results: pd.DataFrame, calibrations: pd.DataFrame | None, part_id: str
) -> PartHistory:
    """Every test of ``part_id`` across stations, oldest first, with its calibration."""
    if "part_id" not in results.columns:
        raise ValueError("results have no part_id column")
    mine = results[results["part_id"].astype("string") == part_id]
    if mine.empty:
        return PartHistory(part_id, [], None, None, [], f"no tests of part {part_id!r} found")
    merged = _attach_calibrations(
        mine, calibrations if calibrations is not None else pd.DataFrame()
    )
    tests: list[PartTest] = []
    for row in merged.to_dict("records"):
        cal_at = _opt(row.get("calibration_at"))
        tests.append(
            PartTest(
                ended_at=pd.Timestamp(row["ended_at"]).to_pydatetime(),
                station=str(row["station"]),
                line=str(row.get("line", "")),
                program=str(row["program"]),
                cycle=int(row["cycle"]),
                verdict=str(row["verdict"]),
                leak_rate_sccm=float(row["leak_rate_sccm"]),
                reject_limit_sccm=float(row["reject_limit_sccm"]),
                reason=str(_opt(row.get("reason")) or ""),
                calibration_ref=_opt(row.get("calibration_ref")),
                calibration_at=None if cal_at is None else pd.Timestamp(cal_at).to_pydatetime(),
                master_loss_pa=_opt(row.get("master_loss_pa")),
                standard_loss_pa=_opt(row.get("standard_loss_pa")),
                calibration_passed=None
                if _opt(row.get("calibration_passed")) is None
                else bool(row["calibration_passed"]),
            )
        )
    counted = [t for t in tests if t.verdict != "aborted"]
    final = counted[-1].verdict if counted else None
    first_pass = next((i for i, t in enumerate(counted) if t.verdict == "pass"), None)
    rejects = None if first_pass is None else sum(t.verdict != "pass" for t in counted[:first_pass])
    missing = sum(t.calibration_at is None for t in tests)
    note = f"{len(tests)} test(s)"
    if missing:
        note += f"; {missing} without a calibration on record before the test"
    return PartHistory(part_id, tests, final, rejects, sorted({t.station for t in tests}), note)


# ----------------------------------------------------------------------------- retests


@dataclass(frozen=True, slots=True)
class RetestAlarm(ResultMixin):
    station: str
    period: str
    retest_share: float
    baseline_share: float
    passes: int
    p_value: float
    message: str


@dataclass(frozen=True, slots=True)
class RetestReport(ResultMixin):
    """Retest-until-pass analysis over parts with ids."""

    parts: int
    passed_parts: int
    passed_after_retest: int
    share_of_passes_after_retest: float | None
    passed_after_two_or_more_rejects: list[str]
    marginal_passes: list[dict[str, Any]]
    by_group: list[dict[str, Any]]
    alarms: list[RetestAlarm]
    parts_without_id: int
    note: str = ""
    by: tuple[str, ...] = field(default_factory=tuple)
    # every part that passed only on a retest: where and when its pass ran (for shift reports)
    retested_passes: list[dict[str, Any]] = field(default_factory=list)


def _part_sequences(results: pd.DataFrame) -> pd.DataFrame:
    df = results.copy()
    df["ended_at"] = pd.to_datetime(df["ended_at"], utc=True)
    df["verdict"] = df["verdict"].astype(str).str.lower()
    df = df[df["verdict"] != "aborted"]
    ids = df["part_id"].astype("string")
    df = df[ids.notna() & (ids.str.strip() != "")]
    return df.sort_values(["ended_at", "station"], kind="mergesort")


def retest_analysis(
    results: pd.DataFrame,
    *,
    by: Sequence[str] = ("station",),
    calendar: ShiftCalendar | None = None,
    guard_band: float | None = None,
    alarm_period: Literal["day", "shift"] = "day",
    alarm_alpha: float = 0.01,
    min_passes: int = 20,
) -> RetestReport:
    """Parts that failed and later passed, and whether a station's retest share jumped.

    A part "passed after retest" when its first pass came after one or more rejects/gross
    results. It is attributed to the station/program/shift of its passing test (where the
    retest happened), since that is where "retest until pass" would be practised. A marginal
    pass is a pass after a reject with a reading in (limit − guard band, limit]; the guard
    band defaults to 10 % of the reject limit (common practice).

    Alarm: for each station and period (local day or shift), the share of passes that needed a
    retest is compared with the station's share over all other periods by a one-sided
    binomial test; p < ``alarm_alpha`` with at least ``min_passes`` passes raises an alarm.
    """
    calendar = calendar or ShiftCalendar()
    df = _part_sequences(results)
    without_id = int(
        (results["part_id"].isna() | (results["part_id"].astype("string").str.strip() == "")).sum()
    )
    if df.empty:
        return RetestReport(
            0, 0, 0, None, [], [], [], [], without_id, "no tests with part ids", tuple(by)
        )
    df = df.assign(
        day=calendar.local_date(df["ended_at"]).astype(str),
        shift=calendar.labels(df["ended_at"]),
    )
    parts = _first_passes(df)
    passed = parts[parts["passed"].astype(bool)]
    after = passed[passed["rejects_before"] > 0]
    two_plus = sorted(after.loc[after["rejects_before"] >= 2, "part_id"].astype(str))
    marginal, retested = [], []
    for r in after.to_dict("records"):
        band = guard_band if guard_band is not None else 0.1 * abs(r["reject_limit_sccm"])
        is_marginal = r["reject_limit_sccm"] - band < r["leak_rate_sccm"] <= r["reject_limit_sccm"]
        keys = ("part_id", "station", "ended_at", "leak_rate_sccm", "reject_limit_sccm",
                "rejects_before")  # fmt: skip
        if is_marginal:
            marginal.append({k: r[k] for k in keys})
        retested.append(
            {k: r[k] for k in (*keys, "line", "program", "day", "shift")}
            | {"marginal": is_marginal}
        )
    by_group = []
    if len(passed) and by:
        for key, g in passed.groupby(list(by), sort=True):
            key_t = key if isinstance(key, tuple) else (key,)
            n_after = int((g["rejects_before"] > 0).sum())
            by_group.append(
                {
                    **dict(zip(by, map(str, key_t), strict=True)),
                    "passes": len(g),
                    "passed_after_retest": n_after,
                    "share": n_after / len(g),
                }
            )
    alarms = _retest_alarms(passed, alarm_period, alarm_alpha, min_passes) if len(passed) else []
    share = len(after) / len(passed) if len(passed) else None
    note = "parts with ids only" + (
        f"; {without_id} test(s) without a part id left out" if without_id else ""
    )
    return RetestReport(
        parts=len(parts),
        passed_parts=len(passed),
        passed_after_retest=len(after),
        share_of_passes_after_retest=share,
        passed_after_two_or_more_rejects=two_plus,
        marginal_passes=marginal,
        by_group=by_group,
        alarms=alarms,
        parts_without_id=without_id,
        note=note,
        by=tuple(by),
        retested_passes=sorted(retested, key=lambda r: (r["ended_at"], r["part_id"])),
    )


def _first_passes(df: pd.DataFrame) -> pd.DataFrame:
    """One row per part (in order of first appearance): whether and where it first passed,
    and how many rejects came before (vectorised: a week of a plant is ~10^5 parts)."""
    df = df.assign(_part=df["part_id"].astype(str).to_numpy())
    grouped = df.groupby("_part", sort=False)
    df["_pos"] = grouped.cumcount()
    tests = grouped.size()
    first = df[df["verdict"] == "pass"].groupby("_part", sort=False).head(1)

    def col(name: str) -> pd.Series:
        return first[name].astype(str) if name in first else pd.Series("", index=first.index)

    passed = pd.DataFrame(
        {
            "part_id": first["_part"],
            "passed": True,
            "rejects_before": first["_pos"].astype(int),
            "ended_at": first["ended_at"],
            "station": first["station"].astype(str),
            "program": col("program"),
            "line": col("line"),
            "day": first["day"],
            "shift": first["shift"],
            "leak_rate_sccm": first["leak_rate_sccm"].astype(float),
            "reject_limit_sccm": first["reject_limit_sccm"].astype(float),
        }
    ).set_index("part_id", drop=False)
    ever_passed = (df["verdict"] == "pass").groupby(df["_part"], sort=False).any()
    never = tests.index[~ever_passed.loc[tests.index].to_numpy()]
    failed = pd.DataFrame(
        {"part_id": never, "passed": False, "rejects_before": tests[never].to_numpy()}, index=never
    )
    frames = [f for f in (passed, failed) if len(f)]
    parts = pd.concat(frames) if frames else passed
    return parts.loc[tests.index].reset_index(drop=True)


def _retest_alarms(
    passed: pd.DataFrame, period: str, alpha: float, min_passes: int
) -> list[RetestAlarm]:
    alarms: list[RetestAlarm] = []
    for station, g in passed.groupby("station", sort=True):
        retested = g["rejects_before"] > 0
        for key, sub in g.groupby(period, sort=True):
            n = len(sub)
            k = int((sub["rejects_before"] > 0).sum())
            rest_n = len(g) - n
            if n < min_passes or rest_n < min_passes:
                continue
            base = float(retested[g[period] != key].mean())
            p0 = max(base, 0.5 / rest_n)  # a zero baseline would make any retest "impossible"
            p_value = float(stats.binomtest(k, n, p0, alternative="greater").pvalue)
            if p_value < alpha:
                alarms.append(
                    RetestAlarm(
                        str(station),
                        str(key),
                        k / n,
                        base,
                        n,
                        p_value,
                        f"{station}: {k}/{n} passes in {key} needed a retest ({k / n:.0%}) against "
                        f"{base:.0%} otherwise (binomial p = {p_value:.2g}): check test time, "
                        "calibration drift, or retesting until pass",
                    )
                )
    return alarms


# ----------------------------------------------------------------------------- leak standards


def add_months(d: date, months: int) -> date:
    """``d`` plus whole months, clamped to the month's last day (31 Jan + 1 → 28/29 Feb)."""
    total = d.year * 12 + (d.month - 1) + months
    year, month = divmod(total, 12)
    month += 1
    last = _calendar.monthrange(year, month)[1]
    return date(year, month, min(d.day, last))


@dataclass(frozen=True, slots=True)
class LeakStandard(ResultMixin):
    """One station's leak standard, as registered in the plant configuration."""

    serial: str
    station: str
    nominal_sccm: float
    reference_pressure_pa: float
    certificate_date: date
    due_date: date | None = None
    interval_months: int | None = None
    uncertainty_pct: float | None = None

    def __post_init__(self) -> None:
        if self.due_date is None and self.interval_months is None:
            raise ValueError(f"leak standard {self.serial}: give due_date or interval_months")
        if self.nominal_sccm <= 0:
            raise ValueError(f"leak standard {self.serial}: nominal flow must be > 0")

    @property
    def due(self) -> date:
        if self.due_date is not None:
            return self.due_date
        assert self.interval_months is not None
        return add_months(self.certificate_date, self.interval_months)


@dataclass(frozen=True, slots=True)
class StandardStatus(ResultMixin):
    serial: str
    station: str
    due_date: date
    days_left: int
    status: Literal["overdue", "due soon", "ok"]
    nominal_sccm: float
    uncertainty_pct: float | None


def standards_due(
    standards: Sequence[LeakStandard], today: date, within_days: int = 30
) -> list[StandardStatus]:
    """Each standard's status on ``today`` (the plant's local date): overdue, due soon or ok.

    A standard is still valid on its due date and overdue from the day after.
    """
    out = []
    for s in standards:
        days = (s.due - today).days
        status: Literal["overdue", "due soon", "ok"] = (
            "overdue" if days < 0 else "due soon" if days <= within_days else "ok"
        )
        out.append(
            StandardStatus(
                s.serial, s.station, s.due, days, status, s.nominal_sccm, s.uncertainty_pct
            )
        )
    return sorted(out, key=lambda x: (x.days_left, x.serial))


def flag_overdue_calibrations(
    calibrations: pd.DataFrame, standards: Sequence[LeakStandard], timezone: str = "UTC"
) -> pd.DataFrame:
    """Calibrations with columns ``standard_serial`` and ``standard_overdue`` added.

    The standard in use is the station's registered one; a calibration whose local date is
    after that standard's due date ran with an overdue standard.
    """
    df = calibrations.copy()
    by_station = {s.station: s for s in standards}
    local = pd.to_datetime(df["ended_at"], utc=True).dt.tz_convert(timezone).dt.date
    serials, overdue = [], []
    for station, day in zip(df["station"].astype(str), local, strict=True):
        s = by_station.get(station)
        serials.append(s.serial if s else None)
        overdue.append(bool(s is not None and day > s.due))
    df["standard_serial"] = serials
    df["standard_overdue"] = overdue
    return df


def standard_drift(calibrations: pd.DataFrame, standard: LeakStandard) -> DriftProjection:
    """Theil–Sen trend of the measured sensitivity on the standard's station since its
    certificate: a standard whose flow drifts shows as a drifting sensitivity."""
    df = calibrations[(calibrations["station"].astype(str) == standard.station)]
    df = df[pd.to_datetime(df["ended_at"], utc=True).dt.date >= standard.certificate_date]
    # calibrations the station did not fail (absent: not judged), with a sensitivity
    df = df[df["passed"].astype("boolean").fillna(True).astype(bool)]
    df = df[pd.to_numeric(df["sensitivity"], errors="coerce").notna()]
    values = df["sensitivity"].to_numpy(dtype=float)
    return project_drift(df["ended_at"], values, None)
