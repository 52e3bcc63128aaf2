"""Canonical records: the one shape every driver emits and every sink consumes.

Units are fixed here so nothing downstream has to ask: pressures in Pa (gauge unless the name
ends in ``_abs``), leak rates in sccm at 0 °C / 101.325 kPa, durations in s, timestamps
timezone-aware UTC. Records are frozen and validated on construction; a record that exists is a
record that makes sense.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, fields
from datetime import UTC, datetime
from enum import StrEnum
from typing import Any, ClassVar, Self

__all__ = [
    "ALARM_CHANGES",
    "ORIGINS",
    "READABLE_SCHEMAS",
    "SCHEMA_VERSION",
    "TIME_SOURCES",
    "TRACE_PHASES",
    "TRACE_ROLES",
    "AlarmEvent",
    "CalibrationEvent",
    "PressureTrace",
    "Record",
    "Rejected",
    "StationState",
    "StationStatus",
    "TestResult",
    "Verdict",
    "record_from_dict",
    "supplied_pairs",
]

SCHEMA_VERSION = 2
#: record schemas ``from_dict`` reads: 1 (every measured field present) and 2 (optional fields,
#: ``time_source``, ``supplied``, ``part_family``)
READABLE_SCHEMAS = (1, 2)
_INF = math.inf
TIME_SOURCES = ("station", "gateway")
ORIGINS = ("config", "profile")


class Verdict(StrEnum):
    PASS = "pass"
    REJECT = "reject"
    GROSS = "gross"
    ABORTED = "aborted"


class StationState(StrEnum):
    ONLINE = "online"
    OFFLINE = "offline"
    FAULT = "fault"
    IDLE = "idle"
    TESTING = "testing"
    CALIBRATING = "calibrating"


def _check_text(name: str, value: object, *, optional: bool = False) -> None:
    if value is None and optional:
        return
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"{name} must be a non-empty string, got {value!r}")


def _check_time(name: str, value: object, *, optional: bool = False) -> None:
    if value is None and optional:
        return
    if not isinstance(value, datetime):
        raise ValueError(f"{name} must be a datetime, got {type(value).__name__}")
    if value.tzinfo is None or value.utcoffset() is None:
        raise ValueError(f"{name} must be timezone-aware (got naive {value.isoformat()})")


def _check_number(
    name: str,
    value: object,
    *,
    optional: bool = False,
    min_value: float | None = None,
) -> None:
    if value is None and optional:
        return
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"{name} must be a number, got {value!r}")
    if not math.isfinite(value):
        raise ValueError(f"{name} must be finite, got {value!r}")
    if min_value is not None and value < min_value:
        raise ValueError(f"{name} must be >= {min_value}, got {value!r}")


def _to_utc(value: datetime) -> datetime:
    try:
        return value.astimezone(UTC)
    except OverflowError:  # year 1 east of Greenwich, year 9999 west of it
        raise ValueError(f"time {value.isoformat()} is outside what UTC can hold "
                         "(years 1..9999)") from None


def _iso(value: datetime | None) -> str | None:
    return None if value is None else _utc_iso(value)


def _utc_iso(value: datetime) -> str:
    """ISO text in UTC; records already hold UTC, so the conversion is skipped for them."""
    return value.isoformat() if value.tzinfo is UTC else value.astimezone(UTC).isoformat()


def _parse_time(value: Any) -> datetime | None:
    if value is None or isinstance(value, datetime):
        return value
    if isinstance(value, str):
        return datetime.fromisoformat(value)
    raise ValueError(f"expected an ISO 8601 timestamp, got {value!r}")


def _check_provenance(time_source: object, supplied: object, names: frozenset[str]) -> None:
    if time_source not in TIME_SOURCES:
        raise ValueError(f"time_source must be one of {', '.join(TIME_SOURCES)}, "
                         f"got {time_source!r}")
    if type(supplied) is not tuple:
        raise ValueError(f"supplied must be a tuple of (field, origin) pairs, got {supplied!r}")
    last = ""
    for pair in supplied:
        if type(pair) is not tuple or len(pair) != 2:
            raise ValueError(f"supplied must hold (field, origin) pairs, got {pair!r}")
        name, origin = pair
        if name not in names:
            raise ValueError(f"supplied names an unknown field {name!r}")
        if origin not in ORIGINS:
            raise ValueError(f"supplied origin of {name} must be one of {', '.join(ORIGINS)}, "
                             f"got {origin!r}")
        if name <= last:
            raise ValueError("supplied must be sorted by field name, each field once")
        last = name


def supplied_pairs(value: Any) -> tuple[tuple[str, str], ...]:
    """``supplied`` from its JSON form (a mapping field → origin), a list of pairs, or None."""
    if value is None:
        return ()
    if isinstance(value, dict):
        return tuple(sorted((str(k), str(v)) for k, v in value.items()))
    return tuple(sorted((str(k), str(v)) for k, v in value))


def _stable_id(*parts: object) -> str:
    digest = hashlib.blake2b("|".join(str(p) for p in parts).encode(), digest_size=12)
    return digest.hexdigest()


class _RecordMixin:
    """Shared JSON round-trip; each record names its kind and its time fields."""

    kind: ClassVar[str]
    _time_fields: ClassVar[tuple[str, ...]]

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"schema": SCHEMA_VERSION, "kind": self.kind}
        for f in fields(self):  # type: ignore[arg-type]
            value = getattr(self, f.name)
            if f.name in self._time_fields:
                value = _iso(value)
            elif isinstance(value, StrEnum):
                value = value.value
            elif f.name == "supplied":
                value = dict(value)
            out[f.name] = value
        out["record_id"] = self.record_id  # type: ignore[attr-defined]
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Self:
        schema = data.get("schema", SCHEMA_VERSION)
        if schema not in READABLE_SCHEMAS:
            raise ValueError(
                f"unsupported record schema {schema!r} (this build reads "
                f"{', '.join(map(str, READABLE_SCHEMAS))})"
            )
        kind = data.get("kind", cls.kind)
        if kind != cls.kind:
            raise ValueError(f"expected a {cls.kind} record, got kind {kind!r}")
        names = {f.name for f in fields(cls)}  # type: ignore[arg-type]
        kwargs = {k: v for k, v in data.items() if k in names}
        for name in cls._time_fields:
            if name in kwargs:
                kwargs[name] = _parse_time(kwargs[name])
        if "supplied" in kwargs:
            kwargs["supplied"] = supplied_pairs(kwargs["supplied"])
        return cls(**kwargs)

    def origin(self, name: str) -> str:
        """Where a field's value came from: "station", "config" or "profile"."""
        for field_name, origin in getattr(self, "supplied", ()):
            if field_name == name:
                return str(origin)
        return "station"


@dataclass(frozen=True, slots=True)
class TestResult(_RecordMixin):
    """One test cycle's outcome as the station judged it.

    A record cannot be without its station, cycle, time and verdict; every measured or
    configured value may be absent (None, never a made-up zero): many stations send no limits
    or times, and a gross leak often has no measured rate. ``supplied`` names the values that
    did not come from the station (the plant's config or a profile constant), ``time_source``
    says whether ``ended_at`` is the station's clock or the gateway's receive time.
    """

    __test__: ClassVar[bool] = False  # keep pytest from collecting this class
    kind: ClassVar[str] = "result"
    _time_fields: ClassVar[tuple[str, ...]] = ("ended_at", "received_at")

    station: str
    line: str
    cycle: int
    ended_at: datetime
    received_at: datetime
    program: str
    verdict: Verdict
    test_pressure_pa: float | None = None
    pressure_loss_pa: float | None = None
    leak_rate_sccm: float | None = None
    reject_limit_sccm: float | None = None
    fill_s: float | None = None
    stabilise_s: float | None = None
    test_s: float | None = None
    part_id: str | None = None
    reason: str = ""
    lower_limit_sccm: float | None = None
    temperature_c: float | None = None
    calibration_ref: str | None = None
    raw: str = ""
    profile: str = ""
    part_family: str | None = None
    time_source: str = "station"
    supplied: tuple[tuple[str, str], ...] = ()

    def __post_init__(self) -> None:
        # Every parsed line builds one of these, so the usual all-valid record is vouched for
        # in one expression (exact types only, the same bounds as below). Anything it does not
        # vouch for, valid or not, goes through _validate, which owns the rules and the errors.
        e, r, temp, inf = self.ended_at, self.received_at, self.temperature_c, _INF
        lo, hi = self.lower_limit_sccm, self.reject_limit_sccm
        tp, loss, leak = self.test_pressure_pa, self.pressure_loss_pa, self.leak_rate_sccm
        fill, stab, test = self.fill_s, self.stabilise_s, self.test_s
        if (
            type(self.station) is str and self.station.strip()
            and type(self.line) is str and self.line.strip()
            and type(self.program) is str and self.program.strip()
            and (self.part_id is None or (type(self.part_id) is str and self.part_id.strip()))
            and type(self.cycle) is int and self.cycle >= 0
            and type(e) is datetime and e.utcoffset() is not None
            and type(r) is datetime and r.utcoffset() is not None
            and type(self.verdict) is Verdict
            and (tp is None or (type(tp) is float and -inf < tp < inf))
            and (loss is None or (type(loss) is float and -inf < loss < inf))
            and (leak is None or (type(leak) is float and -inf < leak < inf))
            and (hi is None or (type(hi) is float and -inf < hi < inf))
            and (lo is None or (type(lo) is float and -inf < lo < inf
                                and (hi is None or lo < hi)))
            and (fill is None or (type(fill) is float and 0.0 <= fill < inf))
            and (stab is None or (type(stab) is float and 0.0 <= stab < inf))
            and (test is None or (type(test) is float and 0.0 <= test < inf))
            and (temp is None or (type(temp) is float and -inf < temp < inf))
            and type(self.reason) is str and type(self.raw) is str
            and self.part_family is None and self.time_source == "station"
            and self.supplied == ()
        ):  # fmt: skip
            if e.tzinfo is not UTC:
                object.__setattr__(self, "ended_at", _to_utc(e))
            if r.tzinfo is not UTC:
                object.__setattr__(self, "received_at", _to_utc(r))
            return
        self._validate()

    def _validate(self) -> None:
        _check_text("station", self.station)
        _check_text("line", self.line)
        _check_text("program", self.program)
        _check_text("part_id", self.part_id, optional=True)
        _check_text("part_family", self.part_family, optional=True)
        if isinstance(self.cycle, bool) or not isinstance(self.cycle, int) or self.cycle < 0:
            raise ValueError(f"cycle must be a non-negative integer, got {self.cycle!r}")
        _check_time("ended_at", self.ended_at)
        _check_time("received_at", self.received_at)
        object.__setattr__(self, "ended_at", _to_utc(self.ended_at))
        object.__setattr__(self, "received_at", _to_utc(self.received_at))
        try:
            object.__setattr__(self, "verdict", Verdict(self.verdict))
        except ValueError:
            allowed = ", ".join(v.value for v in Verdict)
            raise ValueError(f"verdict must be one of {allowed}, got {self.verdict!r}") from None
        for name in ("test_pressure_pa", "pressure_loss_pa", "leak_rate_sccm",
                     "reject_limit_sccm", "lower_limit_sccm", "temperature_c"):
            _check_number(name, getattr(self, name), optional=True)
        if (
            self.lower_limit_sccm is not None
            and self.reject_limit_sccm is not None
            and self.lower_limit_sccm >= self.reject_limit_sccm
        ):
            raise ValueError(
                f"lower limit ({self.lower_limit_sccm:g} sccm) must be below "
                f"the reject limit ({self.reject_limit_sccm:g} sccm)"
            )
        for name in ("fill_s", "stabilise_s", "test_s"):
            _check_number(name, getattr(self, name), optional=True, min_value=0.0)
        if not isinstance(self.reason, str) or not isinstance(self.raw, str):
            raise ValueError("reason and raw must be strings")
        _check_provenance(self.time_source, self.supplied, _RESULT_NAMES)

    @property
    def record_id(self) -> str:
        """Stable across re-reads and re-sends, so consumers can de-duplicate."""
        # the same text _stable_id joins, built in one step (this runs for every stored row)
        key = f"result|{self.station!s}|{self.cycle!s}|{_utc_iso(self.ended_at)}"
        return hashlib.blake2b(key.encode(), digest_size=12).hexdigest()


@dataclass(frozen=True, slots=True)
class CalibrationEvent(_RecordMixin):
    """A master-part calibration: the plain loss is the zero, the standard's loss the span.

    Only the two losses are essential. ``ratio`` (standard loss / master loss) is None when
    the master loss is not above zero (undefined); ``sensitivity`` (sccm per Pa of span) is
    None without a span or without the standard's flow; ``passed`` is None when the station
    did not judge the calibration.
    """

    kind: ClassVar[str] = "calibration"
    _time_fields: ClassVar[tuple[str, ...]] = ("ended_at", "received_at")

    station: str
    line: str
    ended_at: datetime
    received_at: datetime
    program: str
    master_loss_pa: float
    standard_loss_pa: float
    standard_sccm: float | None = None
    standard_ref_pressure_pa: float | None = None
    ratio: float | None = None
    sensitivity: float | None = None
    passed: bool | None = None
    reason: str = ""
    raw: str = ""
    profile: str = ""
    time_source: str = "station"
    supplied: tuple[tuple[str, str], ...] = ()

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_text("line", self.line)
        _check_text("program", self.program)
        _check_time("ended_at", self.ended_at)
        _check_time("received_at", self.received_at)
        object.__setattr__(self, "ended_at", _to_utc(self.ended_at))
        object.__setattr__(self, "received_at", _to_utc(self.received_at))
        for name in ("master_loss_pa", "standard_loss_pa"):
            _check_number(name, getattr(self, name))
        for name in ("ratio", "sensitivity", "standard_ref_pressure_pa"):
            _check_number(name, getattr(self, name), optional=True)
        _check_number("standard_sccm", self.standard_sccm, optional=True, min_value=0.0)
        if self.standard_sccm == 0:
            raise ValueError("the leak standard's flow must be above 0 sccm")
        if self.passed is not None and not isinstance(self.passed, bool):
            raise ValueError(f"passed must be true, false or absent, got {self.passed!r}")
        if not isinstance(self.reason, str) or not isinstance(self.raw, str):
            raise ValueError("reason and raw must be strings")
        _check_provenance(self.time_source, self.supplied, _CAL_NAMES)

    @property
    def record_id(self) -> str:
        return _stable_id("calibration", self.station, self.program, _iso(self.ended_at))


@dataclass(frozen=True, slots=True)
class StationStatus(_RecordMixin):
    """A station's state change as the gateway saw it."""

    kind: ClassVar[str] = "status"
    _time_fields: ClassVar[tuple[str, ...]] = ("at",)

    station: str
    at: datetime
    state: StationState
    detail: str = ""

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_time("at", self.at)
        object.__setattr__(self, "at", _to_utc(self.at))
        try:
            object.__setattr__(self, "state", StationState(self.state))
        except ValueError:
            allowed = ", ".join(s.value for s in StationState)
            raise ValueError(f"state must be one of {allowed}, got {self.state!r}") from None

    @property
    def record_id(self) -> str:
        return _stable_id("status", self.station, _iso(self.at), self.state.value)


@dataclass(frozen=True, slots=True)
class GapEvent(_RecordMixin):
    """Cycles a station ran that the gateway knows it will never read: the loss, on record.

    ``first``..``last`` are the missing cycle numbers (inclusive, as the station counts them,
    so a range may cross a counter wrap: ``first`` > ``last`` then means first..wrap, 0..last).
    ``source`` says who noticed: "ring" (overwritten before it could be read), "sequence" (a
    skipped number in what arrived), "reader" (slots that failed to read). Readers emit one
    when they know; the journal stores it in its gaps table.
    """

    kind: ClassVar[str] = "gap"
    _time_fields: ClassVar[tuple[str, ...]] = ("at",)

    station: str
    at: datetime
    first: int
    last: int
    source: str
    detail: str = ""
    line: str = ""

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_text("source", self.source)
        _check_time("at", self.at)
        object.__setattr__(self, "at", _to_utc(self.at))
        for name in ("first", "last"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 0:
                raise ValueError(f"{name} must be a cycle number >= 0, got {value!r}")

    @property
    def count(self) -> int | None:
        """How many cycles are missing; None across a wrap (the modulus is the reader's)."""
        return self.last - self.first + 1 if self.last >= self.first else None

    @property
    def record_id(self) -> str:
        return _stable_id("gap", self.station, self.first, self.last, self.source)


#: maintenance kinds that change a station's measurement (they restart its calibration
#: baselines); "note" only annotates the charts
MAINTENANCE_KINDS = ("seal change", "new fixture", "new leak standard", "baseline reset",
                     "repair", "note")


@dataclass(frozen=True, slots=True)
class MaintenanceEvent(_RecordMixin):
    """Something a person did to a station (or noted about it), entered on the dashboard or
    with ``leakfleet maintenance add``. ``at`` is when it happened; ``entered_at`` when it was
    written down."""

    kind: ClassVar[str] = "maintenance"
    _time_fields: ClassVar[tuple[str, ...]] = ("at", "entered_at")

    station: str
    at: datetime
    what: str
    note: str = ""
    by: str = ""
    entered_at: datetime | None = None

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_time("at", self.at)
        object.__setattr__(self, "at", _to_utc(self.at))
        if self.entered_at is None:
            object.__setattr__(self, "entered_at", datetime.now(UTC))
        _check_time("entered_at", self.entered_at)
        object.__setattr__(self, "entered_at", _to_utc(self.entered_at))  # type: ignore[arg-type]
        if self.what not in MAINTENANCE_KINDS:
            raise ValueError(f"maintenance kind must be one of {', '.join(MAINTENANCE_KINDS)}, "
                             f"got {self.what!r}")
        for name in ("note", "by"):
            value = getattr(self, name)
            if not isinstance(value, str) or any(ord(c) < 32 and c not in "\t" for c in value):
                raise ValueError(f"{name} must be one line of text")

    @property
    def restarts_baseline(self) -> bool:
        return self.what != "note"

    @property
    def record_id(self) -> str:
        return _stable_id("maintenance", self.station, _iso(self.at), self.what)


#: phase names of a pressure trace, in the order a cycle runs them
TRACE_PHASES = ("fill", "stabilise", "test", "dump", "end")
TRACE_ROLES = ("result", "master", "standard")


@dataclass(frozen=True, slots=True)
class PressureTrace(_RecordMixin):
    """One test's pressure curve: samples at a fixed interval, with the phase boundaries.

    Tied to its test by (station, cycle, ended_at) and ``role``: the result's own test, or a
    calibration's master-part test ("master") or master part with the leak standard open
    ("standard"). ``phases`` are (name, start offset in s from the first sample) pairs in time
    order, as the station reports them (``TRACE_PHASES``; "end" closes the last one).
    Pressures are gauge Pa. A test's loss over stabilise S and test T is a window of the curve,
    which is what lets a long test stand for every shorter one (``analytics.backdown``).
    """

    kind: ClassVar[str] = "trace"
    _time_fields: ClassVar[tuple[str, ...]] = ("ended_at", "received_at", "started_at")

    station: str
    line: str
    cycle: int
    ended_at: datetime
    received_at: datetime
    started_at: datetime
    sample_interval_s: float
    pressures_pa: tuple[float, ...]
    phases: tuple[tuple[str, float], ...] = ()
    role: str = "result"
    program: str = "default"
    profile: str = ""
    time_source: str = "station"

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_text("line", self.line)
        _check_text("program", self.program)
        if isinstance(self.cycle, bool) or not isinstance(self.cycle, int) or self.cycle < 0:
            raise ValueError(f"cycle must be a non-negative integer, got {self.cycle!r}")
        for name in self._time_fields:
            _check_time(name, getattr(self, name))
            object.__setattr__(self, name, _to_utc(getattr(self, name)))
        _check_number("sample_interval_s", self.sample_interval_s)
        if not self.sample_interval_s > 0:
            raise ValueError(f"sample interval must be above 0 s, got {self.sample_interval_s}")
        values = tuple(float(v) for v in self.pressures_pa)
        if len(values) < 2 or not all(math.isfinite(v) for v in values):
            raise ValueError("a trace needs at least two finite pressure samples")
        object.__setattr__(self, "pressures_pa", values)
        phases = tuple((str(n), float(t)) for n, t in self.phases)
        last = -_INF
        for name, at in phases:
            if name not in TRACE_PHASES:
                raise ValueError(f"trace phase must be one of {', '.join(TRACE_PHASES)}, "
                                 f"got {name!r}")
            if not math.isfinite(at) or at < last:
                raise ValueError("trace phases must start in time order")
            last = at
        object.__setattr__(self, "phases", phases)
        if self.role not in TRACE_ROLES:
            raise ValueError(f"trace role must be one of {', '.join(TRACE_ROLES)}, "
                             f"got {self.role!r}")
        if self.time_source not in TIME_SOURCES:
            raise ValueError(f"time_source must be one of {', '.join(TIME_SOURCES)}")

    @property
    def duration_s(self) -> float:
        return (len(self.pressures_pa) - 1) * self.sample_interval_s

    def phase_start(self, name: str) -> float | None:
        """Offset (s) where phase ``name`` starts, or None when the station did not say."""
        for phase, at in self.phases:
            if phase == name:
                return at
        return None

    @property
    def record_id(self) -> str:
        return _stable_id("trace", self.station, self.cycle, _iso(self.ended_at), self.role)


#: what can happen to an alarm occurrence, in the order it happens
ALARM_CHANGES = ("raised", "acknowledged", "cleared")


@dataclass(frozen=True, slots=True)
class AlarmEvent(_RecordMixin):
    """One change of an alarm occurrence (raised, acknowledged, cleared): the append-only
    record a plant's alerting receives. The journal's alarm table holds the occurrence as it
    is now; this says what happened to it and when. ``station`` is None for a fleet-wide
    alarm (a sink's backlog); ``alarm_id`` is the occurrence's number in its journal."""

    kind: ClassVar[str] = "alarm"
    _time_fields: ClassVar[tuple[str, ...]] = ("at", "since")

    alarm_id: int
    key: str
    rule: str
    station: str | None
    severity: str
    message: str
    change: str
    at: datetime
    since: datetime
    by: str | None = None

    def __post_init__(self) -> None:
        if isinstance(self.alarm_id, bool) or not isinstance(self.alarm_id, int):
            raise ValueError(f"alarm_id must be an integer, got {self.alarm_id!r}")
        for name in ("key", "rule", "severity", "message"):
            _check_text(name, getattr(self, name))
        _check_text("station", self.station, optional=True)
        if self.change not in ALARM_CHANGES:
            raise ValueError(f"change must be one of {', '.join(ALARM_CHANGES)}, "
                             f"got {self.change!r}")
        if self.change == "acknowledged":
            _check_text("by", self.by)
        for name in ("at", "since"):
            _check_time(name, getattr(self, name))
            object.__setattr__(self, name, _to_utc(getattr(self, name)))

    @property
    def state(self) -> str:
        """The occurrence's state after this change (the alarm list's words)."""
        return {"raised": "active"}.get(self.change, self.change)

    @property
    def record_id(self) -> str:
        return _stable_id("alarm", self.key, _iso(self.since), self.alarm_id, self.change)


Record = TestResult | CalibrationEvent | StationStatus | PressureTrace | AlarmEvent

#: the fields ``supplied`` may name (everything a station may leave out)
_RESULT_NAMES = frozenset(f.name for f in fields(TestResult)) - {
    "station", "line", "cycle", "ended_at", "received_at", "verdict", "raw", "profile",
    "time_source", "supplied", "calibration_ref",
}
_CAL_NAMES = frozenset(f.name for f in fields(CalibrationEvent)) - {
    "station", "line", "ended_at", "received_at", "raw", "profile", "time_source", "supplied",
    "master_loss_pa", "standard_loss_pa",
}

_KINDS: dict[str, type[TestResult] | type[CalibrationEvent] | type[StationStatus]
             | type[PressureTrace] | type[AlarmEvent]] = {
    "result": TestResult,
    "calibration": CalibrationEvent,
    "status": StationStatus,
    "trace": PressureTrace,
    "alarm": AlarmEvent,
}


def record_from_dict(data: dict[str, Any]) -> Record:
    """Rebuild whichever record a ``to_dict`` produced."""
    kind = data.get("kind")
    if kind not in _KINDS:
        raise ValueError(f"unknown record kind {kind!r}; expected one of {', '.join(_KINDS)}")
    return _KINDS[kind].from_dict(data)


@dataclass(frozen=True, slots=True)
class Rejected:
    """Input that could not become a record: kept, with why, for the quarantine table."""

    station: str
    profile: str
    raw: str
    reason: str
    received_at: datetime
    line_no: int | None = None

    kind: ClassVar[str] = "quarantine"

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_text("reason", self.reason)
        _check_time("received_at", self.received_at)
        object.__setattr__(self, "received_at", _to_utc(self.received_at))
        if not isinstance(self.raw, str):
            raise ValueError("raw must be a string (hex-encode bytes and registers)")

    def to_dict(self) -> dict[str, Any]:
        return {
            "schema": SCHEMA_VERSION,
            "kind": self.kind,
            "station": self.station,
            "profile": self.profile,
            "raw": self.raw,
            "reason": self.reason,
            "received_at": _iso(self.received_at),
            "line_no": self.line_no,
        }
