"""The fleet at a glance: each station's standing from its alarm conditions, worst first.

A person watching twenty stations needs the one that is failing at the top, named in words and
shapes as well as colour (a colour-blind engineer or a monochrome line PC must see it too), and
a station that is merely quiet must not look like one that is failing. This module turns the
rules of ``analytics.alarms`` into one standing per station and orders the fleet by it; the
dashboard only draws what it returns.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Literal

import numpy as np
import pandas as pd

from analytics._result import ResultMixin
from analytics.alarms import (
    AlarmRules,
    Condition,
    calibration_conditions,
    link_conditions,
    reject_conditions,
    reject_streak,
)

__all__ = [
    "LEVELS",
    "Standing",
    "rank",
    "reject_streak",
    "standing",
    "station_conditions",
    "typical_interval",
]

Level = Literal["alarm", "offline", "warning", "ok", "no data"]
#: display order, worst first, with the text and the shape shown beside the colour
LEVELS: dict[str, tuple[int, str, str]] = {
    "alarm": (0, "ALARM", "▲"),
    "offline": (1, "OFFLINE", "■"),
    "warning": (2, "WARNING", "◆"),
    "ok": (3, "OK", "●"),
    "no data": (4, "NO DATA", "○"),
}
_NO_READING = ("gross", "aborted")


@dataclass(frozen=True, slots=True)
class Standing(ResultMixin):
    """One station's place on the fleet board."""

    station: str
    line: str
    level: Level
    conditions: tuple[Condition, ...]
    reject_streak: int
    last_verdict: str | None
    last_leak_sccm: float | None  # None: no reading (gross, aborted, or none sent)
    last_limit_sccm: float | None
    limit_share: float | None  # last leak as a share of its reject limit

    @property
    def label(self) -> str:
        return LEVELS[self.level][1]

    @property
    def symbol(self) -> str:
        return LEVELS[self.level][2]

    @property
    def headline(self) -> str:
        """The most urgent condition in words (empty when there is none)."""
        if not self.conditions:
            return ""
        worst = min(self.conditions, key=lambda c: (c.severity != "alarm", c.since))
        return worst.message


def typical_interval(times: Sequence[datetime] | pd.Series, minimum: int = 3) -> timedelta | None:
    """The station's usual time between results: the median gap of the newest ones.

    The median, not the mean, so one lunch break does not make a silent station look normal;
    None with fewer than ``minimum`` results (nothing to judge silence against yet).
    """
    stamps = pd.to_datetime(pd.Series(list(times)), utc=True).dropna().sort_values()
    if len(stamps) < minimum:
        return None
    gaps = stamps.diff().dropna().dt.total_seconds().to_numpy()
    gaps = gaps[gaps > 0]
    if gaps.size == 0:
        return None
    return timedelta(seconds=float(np.median(gaps)))


def station_conditions(
    station: str,
    *,
    calibrations: pd.DataFrame,
    maintenance: Sequence[datetime],
    verdicts: Sequence[str],
    times: Sequence[datetime],
    state: str | None,
    state_since: datetime | None,
    quarantined_10min: int,
    gaps: Sequence[tuple[int, int, datetime]] = (),
    conflicts: int = 0,
    skew: timedelta | None = None,
    rules: AlarmRules,
    now: datetime,
) -> list[Condition]:
    """Every rule of ``analytics.alarms`` that holds for one station now."""
    out = calibration_conditions(station, calibrations, maintenance, rules, now)
    out += reject_conditions(station, verdicts, times, rules)
    out += link_conditions(
        station, state=state, state_since=state_since,
        last_result=max(times) if len(times) else None,
        typical_cycle=typical_interval(times), quarantined_10min=quarantined_10min,
        gaps=gaps, conflicts=conflicts, skew=skew, rules=rules, now=now,
    )  # fmt: skip
    return out


def standing(
    station: str,
    line: str,
    conditions: Iterable[Condition],
    *,
    verdicts: Sequence[str],
    last_leak_sccm: float | None,
    last_limit_sccm: float | None,
    state: str | None,
) -> Standing:
    """A station's level from its conditions: an alarm beats offline beats a warning."""
    conds = tuple(sorted(conditions, key=lambda c: (c.severity != "alarm", c.since, c.key)))
    level: Level
    if any(c.severity == "alarm" and c.rule != "offline" for c in conds):
        level = "alarm"
    elif state in ("offline", "fault") or any(c.rule == "offline" for c in conds):
        level = "offline"
    elif conds:
        level = "warning"
    elif not verdicts:
        level = "no data"
    else:
        level = "ok"
    last = verdicts[-1] if verdicts else None
    leak = None if last in _NO_READING else _finite(last_leak_sccm)
    limit = _finite(last_limit_sccm)
    share = leak / limit if leak is not None and limit is not None and limit > 0 else None
    return Standing(station, line, level, conds, reject_streak(verdicts), last, leak, limit, share)


def rank(standings: Iterable[Standing]) -> list[Standing]:
    """Worst first; within a level, the longest-standing problem first, then by name."""

    def key(s: Standing) -> tuple[int, float, str, str]:
        oldest = min((c.since.timestamp() for c in s.conditions), default=float("inf"))
        return (LEVELS[s.level][0], oldest, s.line, s.station)

    return sorted(standings, key=key)


def _finite(value: float | None) -> float | None:
    if value is None or pd.isna(value):
        return None
    value = float(value)
    return value if np.isfinite(value) else None


def group_by_line(standings: Iterable[Standing]) -> Mapping[str, list[Standing]]:
    """Lines in the order of their worst station, each line's stations worst first."""
    ordered = rank(standings)
    out: dict[str, list[Standing]] = {}
    for s in ordered:
        out.setdefault(s.line, []).append(s)
    return out
