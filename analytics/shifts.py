"""Shift calendar: which shift (and which production date) a UTC timestamp belongs to.

Shifts are defined on the plant's local wall clock ("06:00"–"14:00") in an IANA time zone, so
they follow daylight-saving changes the way the people on the floor do: a night shift from
22:00 to 06:00 lasts 7 h on the night the clocks go forward and 9 h on the night they go back.
A shift that crosses midnight belongs to the date it started. Times outside every shift map to
no shift (``None``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, time, timedelta
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd

from analytics._result import ResultMixin

__all__ = [
    "COUNT_COLUMNS",
    "DEFAULT_SHIFTS",
    "ShiftCalendar",
    "ShiftWindow",
    "counts_to_shifts",
]

DEFAULT_SHIFTS: tuple[tuple[str, str, str], ...] = (
    ("early", "06:00", "14:00"),
    ("late", "14:00", "22:00"),
    ("night", "22:00", "06:00"),
)

_MINUTES_PER_DAY = 24 * 60


def _parse_hhmm(text: str, what: str) -> time:
    try:
        parsed = time.fromisoformat(text)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected a local time HH:MM, got {text!r}") from None
    return parsed


def _minutes(t: time) -> int:
    return t.hour * 60 + t.minute


@dataclass(frozen=True, slots=True)
class ShiftWindow(ResultMixin):
    """One concrete shift: its production date, name and UTC bounds [start, end)."""

    shift_date: date
    shift: str
    start: datetime
    end: datetime

    @property
    def hours(self) -> float:
        return (self.end - self.start).total_seconds() / 3600.0


@dataclass(frozen=True)
class ShiftCalendar:
    """Named shifts on the local wall clock of ``timezone`` (IANA name, e.g. "Europe/Berlin")."""

    timezone: str = "UTC"
    shifts: Sequence[tuple[str, str, str]] = DEFAULT_SHIFTS
    _parsed: tuple[tuple[str, time, time], ...] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        try:
            ZoneInfo(self.timezone)
        except (ZoneInfoNotFoundError, ValueError):
            raise ValueError(f"shift calendar: unknown time zone {self.timezone!r}") from None
        if not self.shifts:
            raise ValueError("shift calendar: at least one shift is needed")
        parsed: list[tuple[str, time, time]] = []
        names: set[str] = set()
        covered = np.zeros(_MINUTES_PER_DAY, dtype=int)
        for entry in self.shifts:
            if len(entry) != 3:
                raise ValueError(f"shift calendar: expected (name, start, end), got {entry!r}")
            name, start_text, end_text = entry
            if not isinstance(name, str) or not name.strip():
                raise ValueError(f"shift calendar: shift name must be non-empty, got {name!r}")
            if name in names:
                raise ValueError(f"shift calendar: shift {name!r} defined twice")
            names.add(name)
            start = _parse_hhmm(start_text, f"shift {name!r} start")
            end = _parse_hhmm(end_text, f"shift {name!r} end")
            if start == end:
                raise ValueError(f"shift {name!r}: start and end are both {start_text}")
            for minute in self._span_minutes(start, end):
                covered[minute] += 1
            parsed.append((name, start, end))
        if (covered > 1).any():
            first = int(np.argmax(covered > 1))
            raise ValueError(
                f"shift calendar: shifts overlap at {first // 60:02d}:{first % 60:02d} local time"
            )
        object.__setattr__(self, "shifts", tuple(tuple(s) for s in self.shifts))
        object.__setattr__(self, "_parsed", tuple(parsed))

    @classmethod
    def from_starts(cls, timezone: str, starts: Mapping[str, str]) -> ShiftCalendar:
        """Shifts given by their local start times only (the plant config's ``[shifts]``):
        each shift ends where the next one, in time-of-day order, starts."""
        if not starts:
            raise ValueError("shift calendar: at least one shift is needed")
        parsed = sorted(
            ((_minutes(_parse_hhmm(t, f"shift {n!r} start")), n, t) for n, t in starts.items()),
            key=lambda x: x[0],
        )
        if len({m for m, _, _ in parsed}) != len(parsed):
            raise ValueError("shift calendar: two shifts start at the same time")
        ends = [t for _, _, t in parsed[1:]] + [parsed[0][2]]
        return cls(timezone, tuple((n, t, e) for (_, n, t), e in zip(parsed, ends, strict=True)))

    @staticmethod
    def _span_minutes(start: time, end: time) -> list[int]:
        a, b = _minutes(start), _minutes(end)
        if a < b:
            return list(range(a, b))
        return list(range(a, _MINUTES_PER_DAY)) + list(range(0, b))

    @property
    def tz(self) -> ZoneInfo:
        return ZoneInfo(self.timezone)

    @property
    def names(self) -> list[str]:
        return [name for name, _, _ in self._parsed]

    def shift_of(self, at: datetime) -> tuple[date, str] | None:
        """(production date, shift name) for an aware timestamp, or None outside all shifts.

        Decided by the shifts' windows (``window``), so a timestamp is in a shift exactly when
        it lies inside that shift's window, also around the clock changes: a boundary at a
        wall time that happens twice (the repeated hour in autumn) is its first occurrence."""
        if at.tzinfo is None or at.utcoffset() is None:
            raise ValueError(f"shift_of needs a timezone-aware timestamp, got {at.isoformat()}")
        instant = at.astimezone(UTC)
        for w in self.windows_between(instant, instant + timedelta(microseconds=1)):
            if w.start <= instant < w.end:
                return w.shift_date, w.shift
        return None

    def window(self, shift_date: date, shift: str) -> ShiftWindow:
        """UTC bounds of one shift; the wall-clock times are resolved in the local zone."""
        for name, start, end in self._parsed:
            if name != shift:
                continue
            tz = self.tz
            end_date = (
                shift_date if _minutes(start) < _minutes(end) else shift_date + timedelta(days=1)
            )
            start_utc = datetime.combine(shift_date, start, tzinfo=tz).astimezone(UTC)
            end_utc = datetime.combine(end_date, end, tzinfo=tz).astimezone(UTC)
            return ShiftWindow(shift_date, name, start_utc, end_utc)
        raise ValueError(f"unknown shift {shift!r}; the calendar has {', '.join(self.names)}")

    def windows_between(self, since: datetime, until: datetime) -> list[ShiftWindow]:
        """Every shift overlapping [since, until), in time order."""
        local_since = since.astimezone(self.tz).date() - timedelta(days=1)
        local_until = until.astimezone(self.tz).date() + timedelta(days=1)
        out: list[ShiftWindow] = []
        day = local_since
        while day <= local_until:
            for name in self.names:
                w = self.window(day, name)
                if w.end > since and w.start < until:
                    out.append(w)
            day += timedelta(days=1)
        return sorted(out, key=lambda w: w.start)

    def assign(self, timestamps: pd.Series) -> pd.DataFrame:
        """Vectorised ``shift_of``: columns ``shift_date`` (date or None) and ``shift``; the
        same windows decide, so both always agree with ``window``."""
        ts = pd.to_datetime(timestamps, utc=True)
        shift = np.full(len(ts), None, dtype=object)
        shift_date = np.full(len(ts), None, dtype=object)
        known = ts.notna().to_numpy()
        if known.any():
            first, last = ts[known].min(), ts[known].max()
            wins = self.windows_between(first.to_pydatetime(),
                                        last.to_pydatetime() + timedelta(microseconds=1))
            starts = pd.DatetimeIndex([w.start for w in wins]).as_unit("ns").asi8
            ends = pd.DatetimeIndex([w.end for w in wins]).as_unit("ns").asi8
            ns = pd.DatetimeIndex(ts).as_unit("ns").asi8
            pos = np.searchsorted(starts, ns, side="right") - 1
            inside = known & (pos >= 0)
            inside[inside] &= ns[inside] < ends[pos[inside]]
            names = np.array([w.shift for w in wins], dtype=object)
            dates = np.array([w.shift_date for w in wins], dtype=object)
            shift[inside] = names[pos[inside]]
            shift_date[inside] = dates[pos[inside]]
        return pd.DataFrame({"shift_date": shift_date, "shift": shift}, index=timestamps.index)

    def labels(self, timestamps: pd.Series) -> pd.Series:
        """Each timestamp's shift as text, "YYYY-MM-DD name", or "(no shift)" (the grouping
        key of yields and retests by shift)."""
        assigned = self.assign(timestamps)
        has = assigned["shift"].notna()
        out = pd.Series("(no shift)", index=assigned.index, dtype=object)
        dates = assigned.loc[has, "shift_date"].astype(str)
        out[has] = dates + " " + assigned.loc[has, "shift"].astype(str)
        return out

    def local_date(self, timestamps: pd.Series) -> pd.Series:
        """Local calendar date of each UTC timestamp (the 'day' grouping)."""
        ts = pd.to_datetime(timestamps, utc=True)
        return ts.dt.tz_convert(self.timezone).dt.date


COUNT_COLUMNS = ("n", "parts", "first_pass", "final_pass", "tests", "no_part_id")


def counts_to_shifts(
    counts: pd.DataFrame,
    calendar: ShiftCalendar,
    *,
    time_col: str = "bucket",
    count_cols: Sequence[str] | None = None,
    bucket: timedelta = timedelta(hours=1),
) -> tuple[pd.DataFrame, bool]:
    """Fold pre-aggregated UTC bucket counts (e.g. the store's hourly verdict or first-pass
    counts) into shifts.

    Each bucket goes to the shift its start falls in; count columns (default: those of
    ``COUNT_COLUMNS`` present) are summed, every other column is a grouping key. Returns the
    summed frame (``shift_date``, ``shift``, keys, counts) and ``exact``: False when some bucket
    straddles a shift boundary (a zone with a non-whole-hour offset, or a shift boundary not on
    the hour), in which case counts near that boundary may sit in the neighbouring shift.
    """
    cols = (
        list(count_cols)
        if count_cols is not None
        else [c for c in COUNT_COLUMNS if c in counts.columns]
    )
    if time_col not in counts.columns or not cols or any(c not in counts.columns for c in cols):
        raise ValueError(
            f"counts need a {time_col!r} column and count column(s) "
            f"{', '.join(cols or COUNT_COLUMNS)}; got {', '.join(map(str, counts.columns))}"
        )
    group = [c for c in counts.columns if c != time_col and c not in cols]
    if counts.empty:
        return pd.DataFrame(columns=["shift_date", "shift", *group, *cols]), True
    starts = pd.to_datetime(counts[time_col], utc=True)
    at_start = calendar.assign(starts)
    last = starts + pd.Timedelta(bucket) - pd.Timedelta(microseconds=1)
    at_end = calendar.assign(last)
    exact = bool(
        (at_start["shift"].astype(str) == at_end["shift"].astype(str)).all()
        and (at_start["shift_date"].astype(str) == at_end["shift_date"].astype(str)).all()
    )
    frame = pd.concat([at_start, counts[[*group, *cols]]], axis=1)
    frame = frame[frame["shift"].notna()]
    out = (
        frame.groupby(["shift_date", "shift", *group], dropna=False, sort=True)[cols]
        .sum()
        .reset_index()
    )
    return out, exact
