"""The fleet's alarm rules: what needs a person now, as conditions with a stable identity.

Each rule is a pure function of what the store holds (records, summaries, sink state) that
returns the ``Condition`` s true *now*; ``transitions`` turns the difference between those and
the alarms already open into state changes (raise, clear), so an alarm keeps one identity from
the moment it is raised, through a person's acknowledgement, until its condition is gone. The
gateway runs the rules and keeps the states in its journal (so every screen, the shift report
and the MQTT alarm topics agree); the dashboard only shows and acknowledges them.

Calibration control charts belong to a calibration *epoch*: a stretch of a station's life
between maintenance events that change the measurement (a seal change, a new fixture, a new
leak standard, or a person resetting the baseline). An epoch's target and σ come from its own
first calibrations (phase I, ``phase1`` of them; NIST/SEMATECH e-Handbook 6.3.1 on estimating
limits from an in-control baseline), never from the range a viewer picks, and a maintenance
event starts a fresh baseline instead of leaving the chart to signal for ever after a known
change.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Literal

import numpy as np
import pandas as pd

from analytics._result import ResultMixin
from analytics.audit import StandardStatus
from analytics.drift import cusum_chart, ewma_chart

__all__ = [
    "EPOCH_EVENTS",
    "AlarmRules",
    "Condition",
    "Transition",
    "calibration_conditions",
    "clock_skew",
    "epochs",
    "forecast_errors",
    "link_conditions",
    "reject_conditions",
    "reject_streak",
    "sink_conditions",
    "standard_conditions",
    "transitions",
]

Severity = Literal["warning", "alarm"]
#: maintenance event kinds that change a station's measurement and so start a new epoch
EPOCH_EVENTS = ("seal change", "new fixture", "new leak standard", "baseline reset", "repair")


@dataclass(frozen=True, slots=True)
class Condition(ResultMixin):
    """A rule found true now. ``key`` is the alarm's identity across evaluations."""

    key: str
    rule: str
    station: str | None
    severity: Severity
    since: datetime
    message: str


@dataclass(frozen=True, slots=True)
class Transition(ResultMixin):
    key: str
    change: Literal["raise", "clear"]
    condition: Condition | None  # the condition raised (None when clearing)


@dataclass(frozen=True, slots=True)
class AlarmRules:
    """Thresholds for the rules (per plant; common practice values as defaults)."""

    phase1: int = 10  # calibrations that set an epoch's baseline
    ewma_lambda: float = 0.2
    ewma_L: float = 3.0
    cusum_k: float = 0.5
    cusum_h: float = 5.0
    trend_window: int = 20  # calibrations the local trend line is fitted through
    calibration_interval: timedelta | None = None  # overdue after this (None: not checked)
    reject_streak: int = 3  # this many rejects in a row
    reject_window: int = 50  # tests the reject rate is counted over
    reject_rate: float = 0.15  # share of rejects in that window
    silent_factor: float = 5.0  # silent after this many typical cycle times
    silent_min: timedelta = timedelta(minutes=5)
    garbage_per_10min: int = 20  # quarantined lines a station may send in 10 minutes
    backlog_age: timedelta = timedelta(minutes=5)  # a sink's oldest unsent record
    clock_ahead: timedelta = timedelta(minutes=2)  # a station clock this far ahead is wrong
    gap_window: timedelta = timedelta(hours=1)  # lost cycles keep a station's warning this long
    standard_due_days: int = 30  # a leak standard's recertification warns this many days ahead


def epochs(times: Sequence[datetime] | pd.Series, events: Iterable[datetime]) -> np.ndarray:
    """Epoch number of each calibration time: how many epoch-starting events precede it."""
    t = pd.to_datetime(pd.Series(list(times)), utc=True).to_numpy()
    starts = np.sort(pd.to_datetime(pd.Series(list(events)), utc=True).to_numpy())
    return np.searchsorted(starts, t, side="right")


def _age(now: datetime, since: datetime) -> str:
    seconds = max(0.0, (now - since).total_seconds())
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    if seconds < 172800:
        return f"{seconds / 3600:.1f} h"
    return f"{seconds / 86400:.1f} days"


def calibration_conditions(
    station: str,
    calibrations: pd.DataFrame,
    maintenance: Sequence[datetime],
    rules: AlarmRules,
    now: datetime,
) -> list[Condition]:
    """Failed, overdue and drifting calibrations of one station (all its programs).

    ``calibrations`` has ``ended_at``, ``program``, ``master_loss_pa``, ``sensitivity`` and
    ``passed`` (absent: not judged); ``maintenance`` the times of epoch-starting events.
    """
    out: list[Condition] = []
    if calibrations.empty:
        return out
    cal = calibrations.sort_values("ended_at", kind="mergesort")
    times = pd.to_datetime(cal["ended_at"], utc=True)
    for program, g in cal.groupby("program", sort=True):
        g = g.sort_values("ended_at", kind="mergesort")
        last = g.iloc[-1]
        at = pd.Timestamp(last["ended_at"]).to_pydatetime()
        passed = last["passed"]
        if pd.notna(passed) and not bool(passed):
            why = f": {last['reason']}" if str(last.get("reason") or "") else ""
            out.append(Condition(f"calibration-failed:{station}:{program}", "calibration-failed",
                                 station, "alarm", at,
                                 f"last calibration of {program} failed{why}"))
        out += _drift(station, str(program), g, maintenance, rules)
    if rules.calibration_interval is not None:
        newest = times.max().to_pydatetime()
        if now - newest > rules.calibration_interval:
            out.append(Condition(f"calibration-overdue:{station}", "calibration-overdue",
                                 station, "warning", newest + rules.calibration_interval,
                                 f"no calibration for {_age(now, newest)} (interval "
                                 f"{_age(newest, newest + rules.calibration_interval)})"))
    return out


def forecast_errors(values: np.ndarray, start: int, window: int) -> np.ndarray:
    """Standardised one-step-ahead prediction errors of a local straight line.

    Each value from ``start`` on is predicted from a least-squares line through the ``window``
    values before it; the error is divided by the line's prediction standard error
    (s·√(1 + 1/n + (x₀ − x̄)²/Sxx), the textbook prediction interval of simple regression).
    Charting these instead of the raw values (Alwan & Roberts 1988, special-cause charts on
    forecast errors) lets a steady trend such as seal wear pass as expected while a step
    (a damaged fixture, a blocked leak standard) or a change of the trend still signals.
    """
    values = np.asarray(values, dtype=float)
    first_full = max(start, window)
    parts = [_errors_one_by_one(values, start, min(first_full, values.size))]
    if values.size > first_full and window >= 4:
        # every full window at once (one row per predicted value): same formula, no loop
        y = np.lib.stride_tricks.sliding_window_view(values[:-1], window)[first_full - window:]
        x = np.arange(window, dtype=float)  # window-local; predicted at ``window``
        xc = x - x.mean()
        sxx = float(np.sum(xc**2))
        ybar = y.mean(axis=1)
        slope = (y - ybar[:, None]) @ xc / sxx
        resid = y - (ybar[:, None] + slope[:, None] * xc)
        s = np.sqrt(np.sum(resid**2, axis=1) / (window - 2))
        se = s * np.sqrt(1.0 + 1.0 / window + (window - x.mean()) ** 2 / sxx)
        target = values[first_full:]
        pred = ybar + slope * (window - x.mean())
        ok = se > 1e-12 * np.maximum(1.0, np.abs(target))
        parts.append((target[ok] - pred[ok]) / se[ok])
    return np.concatenate(parts)


def _errors_one_by_one(values: np.ndarray, start: int, stop: int) -> np.ndarray:
    """Forecast errors for ``start <= i < stop`` whose windows are still short (the first
    ``window`` values of a series)."""
    out = []
    for i in range(start, stop):
        lo = 0
        y = values[lo:i]
        x = np.arange(lo, i, dtype=float)
        if y.size < 4:
            continue
        slope, intercept = np.polyfit(x, y, 1)
        resid = y - (intercept + slope * x)
        s = float(np.sqrt(np.sum(resid**2) / (y.size - 2)))
        sxx = float(np.sum((x - x.mean()) ** 2))
        se = s * np.sqrt(1.0 + 1.0 / y.size + (i - x.mean()) ** 2 / sxx)
        if not se > 1e-12 * max(1.0, abs(float(values[i]))):
            continue
        out.append((values[i] - (intercept + slope * i)) / se)
    return np.asarray(out, dtype=float)


def _drift(station: str, program: str, g: pd.DataFrame, maintenance: Sequence[datetime],
           rules: AlarmRules) -> list[Condition]:
    """EWMA/CUSUM of the current epoch's forecast errors: a change the epoch's own trend does
    not explain (phase I: its first ``rules.phase1`` passed calibrations)."""
    ok = g["passed"].astype("boolean").fillna(True).astype(bool).to_numpy()
    g = g[ok]
    if g.empty:
        return []
    number = epochs(g["ended_at"], maintenance)
    if number[-1] < len(list(maintenance)):
        return []  # maintenance since the last calibration: a new epoch with no baseline yet
    current = g[number == number[-1]]
    out = []
    for name, label in (("master_loss_pa", "master loss"), ("sensitivity", "sensitivity")):
        values = pd.to_numeric(current[name], errors="coerce").to_numpy(dtype=float)
        keep = np.isfinite(values)
        values = values[keep]
        if values.size <= rules.phase1:
            continue  # still setting the baseline: nothing to judge against yet
        z = forecast_errors(values, rules.phase1, rules.trend_window)
        if z.size == 0:
            continue
        charts = (
            ewma_chart(z, 0.0, 1.0, lam=rules.ewma_lambda, L=rules.ewma_L),
            cusum_chart(z, 0.0, 1.0, k=rules.cusum_k, h=rules.cusum_h),
        )
        at_times = pd.to_datetime(current["ended_at"], utc=True).to_numpy()[keep]
        offset = values.size - z.size
        for chart in charts:
            if not chart.points[-1].signal:
                continue  # out of control now is what an alarm is about
            first = len(chart.points) - 1
            while first > 0 and chart.points[first - 1].signal:
                first -= 1
            since = pd.Timestamp(at_times[first + offset]).to_pydatetime()
            out.append(Condition(
                f"calibration-drift:{station}:{program}:{name}:{chart.kind}",
                "calibration-drift", station, "warning", since,
                f"{label} of {program} changed beyond its own trend ({chart.kind.upper()}) "
                f"since calibration {first + offset + 1} of this epoch",
            ))
    return out


def reject_streak(verdicts: Sequence[str]) -> int:
    """Rejects (and gross leaks) in a row at the newest end; aborted tests neither break nor
    extend a streak, since they judged nothing."""
    streak = 0
    for v in reversed([v for v in verdicts if v != "aborted"]):
        if v not in ("reject", "gross"):
            break
        streak += 1
    return streak


def reject_conditions(station: str, verdicts: Sequence[str], times: Sequence[datetime],
                      rules: AlarmRules) -> list[Condition]:
    """A streak of rejects, or too many rejects among the newest tests (aborted ones left out).

    ``verdicts``/``times`` are the station's newest tests, oldest first.
    """
    pairs = [(v, t) for v, t in zip(verdicts, times, strict=True) if v != "aborted"]
    out: list[Condition] = []
    if not pairs:
        return out
    streak = reject_streak([v for v, _ in pairs])
    if streak >= rules.reject_streak:
        since = pairs[len(pairs) - streak][1]
        out.append(Condition(f"reject-streak:{station}", "reject-streak", station, "alarm",
                             since, f"{streak} rejects in a row"))
    window = pairs[-rules.reject_window:]
    if len(window) >= rules.reject_window:
        n = sum(v in ("reject", "gross") for v, _ in window)
        if n / len(window) > rules.reject_rate:
            out.append(Condition(f"reject-rate:{station}", "reject-rate", station, "warning",
                                 window[0][1], f"{n} rejects in the last {len(window)} tests "
                                 f"({n / len(window):.0%}, above {rules.reject_rate:.0%})"))
    return out


def clock_skew(ended: Sequence[datetime | None], received: Sequence[datetime | None],
               minimum: int = 5) -> timedelta | None:
    """How far a station's clock runs ahead of the gateway's: the median of (end of test by
    the station's clock − receipt by the gateway's) over recent results stamped by the station.

    A result cannot be received before it ended, so a positive value is the clock's lead; a
    negative one is its lag plus the reading delay (a polled station is read up to a poll
    interval late). The median keeps a few late reads (after an outage) from moving it. None
    with fewer than ``minimum`` results."""
    pairs = [(e, r) for e, r in zip(ended, received, strict=True)
             if e is not None and r is not None]
    if len(pairs) < minimum:
        return None
    return timedelta(seconds=float(np.median([(e - r).total_seconds() for e, r in pairs])))


def _span(d: timedelta) -> str:
    seconds = abs(d.total_seconds())
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def link_conditions(
    station: str,
    *,
    state: str | None,
    state_since: datetime | None,
    last_result: datetime | None,
    typical_cycle: timedelta | None,
    quarantined_10min: int,
    gaps: Sequence[tuple[int, int, datetime]] = (),
    conflicts: int = 0,
    skew: timedelta | None = None,
    rules: AlarmRules,
    now: datetime,
) -> list[Condition]:
    """Offline or faulted, silent for longer than its cycle suggests, garbage on the line,
    cycles lost (gaps), conflicting re-sends and a station clock running ahead."""
    out: list[Condition] = []
    if skew is not None and skew > rules.clock_ahead:
        out.append(Condition(f"clock:{station}", "clock", station, "warning", now,
                             f"station clock {_span(skew)} ahead of the gateway's: its "
                             "results are stamped in the future (set the station's clock)"))
        if last_result is not None:
            last_result -= skew  # judge silence on the gateway's clock
    if state in ("offline", "fault") and state_since is not None:
        out.append(Condition(f"link:{station}", "offline", station, "alarm", state_since,
                             f"station {state} for {_age(now, state_since)}"))
    elif last_result is not None and typical_cycle is not None:
        quiet = max(rules.silent_min, typical_cycle * rules.silent_factor)
        if now - last_result > quiet:
            out.append(Condition(f"silent:{station}", "silent", station, "warning",
                                 last_result + quiet,
                                 f"no result for {_age(now, last_result)} (usually one every "
                                 f"{typical_cycle.total_seconds():.0f} s)"))
    if quarantined_10min > rules.garbage_per_10min:
        out.append(Condition(f"garbage:{station}", "garbage", station, "warning", now,
                             f"{quarantined_10min} unreadable lines in 10 minutes "
                             "(wrong line settings, a noisy cable, or another profile?)"))
    gaps = [g for g in gaps if now - g[2] <= rules.gap_window]  # an event, not a state
    if gaps:
        # one alarm per station, however many gaps: a list with an entry per lost cycle
        # would bury the station that is really failing
        lost = sum(last - first + 1 for first, last, _ in gaps)
        first, last, _ = max(gaps, key=lambda g: g[2])
        newest = f"cycle {first}" if first == last else f"cycles {first}..{last}"
        runs = f" in {len(gaps)} gaps" if len(gaps) > 1 else ""
        out.append(Condition(f"gap:{station}", "gap", station, "warning",
                             min(at for _, _, at in gaps),
                             f"{lost} cycle{'s' if lost != 1 else ''} lost{runs} before they "
                             f"could be read (newest: {newest})"))
    if conflicts:
        out.append(Condition(f"conflict:{station}", "conflict", station, "warning", now,
                             f"{conflicts} re-sent record(s) differ from what was stored"))
    return out


def standard_conditions(statuses: Iterable[StandardStatus], now: datetime) -> list[Condition]:
    """Leak standards past their recertification date (an alarm: calibrations against them
    are no longer traceable) or due within ``AlarmRules.standard_due_days`` (a warning)."""
    out = []
    for s in statuses:
        if s.status == "overdue":
            out.append(Condition(f"standard:{s.serial}", "standard-due", s.station, "alarm", now,
                                 f"leak standard {s.serial} overdue for recertification since "
                                 f"{s.due_date:%Y-%m-%d}"))
        elif s.status == "due soon":
            left = "today" if s.days_left == 0 else f"in {s.days_left} d"
            out.append(Condition(f"standard:{s.serial}", "standard-due", s.station, "warning",
                                 now, f"leak standard {s.serial} due for recertification {left} "
                                 f"({s.due_date:%Y-%m-%d})"))
    return out


def sink_conditions(backlogs: Mapping[str, tuple[int, timedelta | None]], rules: AlarmRules,
                    now: datetime) -> list[Condition]:
    """Sinks whose oldest unsent record is older than ``rules.backlog_age``."""
    out = []
    for sink, (count, oldest) in sorted(backlogs.items()):
        if oldest is not None and oldest > rules.backlog_age:
            out.append(Condition(f"sink-backlog:{sink}", "sink-backlog", None, "warning",
                                 now - oldest, f"sink {sink}: {count} record(s) waiting, the "
                                 f"oldest for {_age(now, now - oldest)}"))
    return out


def transitions(now_true: Iterable[Condition], open_keys: Iterable[str]) -> list[Transition]:
    """Raise what is newly true, clear what is no longer true; open alarms that stay true
    (acknowledged or not) change nothing."""
    current = {c.key: c for c in now_true}
    opened = set(open_keys)
    out = [Transition(k, "raise", c) for k, c in sorted(current.items()) if k not in opened]
    out += [Transition(k, "clear", None) for k in sorted(opened - set(current))]
    return out
