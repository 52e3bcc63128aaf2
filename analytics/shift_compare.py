"""What a shift report sets beside a shift's own figures: the previous shift, the targets, and
the journal's alarm states at the shift's end (pure: records in, results out).

The alarm states come from the journal's alarm table (``gateway.store.logbook``), the same
list the dashboard shows and a plant's alerting receives, so the printed page agrees with the
screens: an occurrence is open at an instant when it was raised before it and not cleared by
then, and acknowledged when its acknowledgement came before that instant.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any, Literal

from analytics._result import ResultMixin
from analytics.shifts import ShiftCalendar, ShiftWindow

__all__ = [
    "COMPARED",
    "AlarmState",
    "Comparison",
    "JournalAlarm",
    "alarm_states",
    "compare_shift",
    "journal_alarms",
    "previous_window",
]

#: (figure, label, better when higher) compared with the previous shift; yields also with a target
COMPARED: tuple[tuple[str, str, bool], ...] = (
    ("first_pass_yield", "First-pass yield", True),
    ("final_yield", "Final yield", True),
    ("retest_share", "Passes after retest", False),
    ("tests", "Tests", True),
)
AlarmState = Literal["active", "acknowledged", "clear"]


@dataclass(frozen=True, slots=True)
class Comparison(ResultMixin):
    """One figure of a line against the previous shift and its target.

    ``change`` is this minus previous (shares as fractions, so 0.02 is two percentage
    points); ``versus_target`` this minus target; ``met`` whether the target is reached."""

    figure: str
    label: str
    this: float | None
    previous: float | None
    change: float | None
    target: float | None
    versus_target: float | None
    met: bool | None
    better: bool | None  # the change goes the good way (None: no change or nothing to compare)


@dataclass(frozen=True, slots=True)
class JournalAlarm(ResultMixin):
    """An alarm occurrence of the journal that was open at some time in the shift."""

    id: int
    station: str | None
    rule: str
    severity: str
    message: str
    raised_at: datetime
    acked_at: datetime | None
    acked_by: str | None
    cleared_at: datetime | None
    state_at_end: Literal["active", "acknowledged", "cleared"]


def previous_window(calendar: ShiftCalendar, window: ShiftWindow) -> ShiftWindow | None:
    """The calendar's shift that ended last at or before ``window`` started (None if none
    within two days, a calendar with gaps over a weekend included)."""
    earlier = [w for w in calendar.windows_between(window.start - timedelta(days=2), window.start)
               if w.end <= window.start]
    return earlier[-1] if earlier else None


def compare_shift(this: Mapping[str, float | int | None],
                  previous: Mapping[str, float | int | None] | None,
                  targets: Mapping[str, float] | None = None) -> list[Comparison]:
    """The ``COMPARED`` figures of a line, each beside the previous shift's and its target."""
    out = []
    for figure, label, higher in COMPARED:
        now = _number(this.get(figure))
        before = None if previous is None else _number(previous.get(figure))
        change = None if now is None or before is None else now - before
        target = (targets or {}).get(figure)
        versus = None if now is None or target is None else now - float(target)
        met = None if versus is None else (versus >= 0 if higher else versus <= 0)
        better = None if not change else (change > 0) == higher
        out.append(Comparison(figure, label, now, before, change,
                              None if target is None else float(target), versus, met, better))
    return out


def _number(value: Any) -> float | None:
    return None if value is None else float(value)


def _field(row: Any, name: str) -> Any:
    return row[name] if isinstance(row, Mapping) else getattr(row, name)


def journal_alarms(rows: Iterable[Any], window: ShiftWindow) -> list[JournalAlarm]:
    """The occurrences (``AlarmRow``s or mappings with their fields) open at some time in the
    shift, oldest first, each with its state at the shift's end."""
    out = []
    for a in rows:
        raised, cleared = _field(a, "raised_at"), _field(a, "cleared_at")
        if raised >= window.end or (cleared is not None and cleared < window.start):
            continue
        acked = _field(a, "acked_at")
        state: Literal["active", "acknowledged", "cleared"]
        if cleared is not None and cleared < window.end:
            state = "cleared"
        elif acked is not None and acked < window.end:
            state = "acknowledged"
        else:
            state = "active"
        out.append(JournalAlarm(int(_field(a, "id")), _field(a, "station"), _field(a, "rule"),
                                _field(a, "severity"), _field(a, "message"), raised, acked,
                                _field(a, "acked_by"), cleared, state))
    return sorted(out, key=lambda x: (x.raised_at, x.id))


def alarm_states(alarms: Sequence[JournalAlarm]) -> dict[str | None, tuple[AlarmState, int]]:
    """Per station (None: fleet-wide): the worst state open at the shift's end (active before
    acknowledged) and how many occurrences were open then."""
    out: dict[str | None, tuple[AlarmState, int]] = {}
    for a in alarms:
        if a.state_at_end == "cleared":
            continue
        state, n = out.get(a.station, ("clear", 0))
        worst: AlarmState = "active" if "active" in (state, a.state_at_end) else "acknowledged"
        out[a.station] = (worst, n + 1)
    return out
