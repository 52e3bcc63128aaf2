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
    "SCHEMA_VERSION",
    "CalibrationEvent",
    "Record",
    "Rejected",
    "StationState",
    "StationStatus",
    "TestResult",
    "Verdict",
    "record_from_dict",
]

SCHEMA_VERSION = 1
_INF = math.inf


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
    return value.astimezone(UTC)


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
            out[f.name] = value
        out["record_id"] = self.record_id  # type: ignore[attr-defined]
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Self:
        schema = data.get("schema", SCHEMA_VERSION)
        if schema != SCHEMA_VERSION:
            raise ValueError(
                f"unsupported record schema {schema!r} (this build reads {SCHEMA_VERSION})"
            )
        kind = data.get("kind", cls.kind)
        if kind != cls.kind:
            raise ValueError(f"expected a {cls.kind} record, got kind {kind!r}")
        names = {f.name for f in fields(cls)}  # type: ignore[arg-type]
        kwargs = {k: v for k, v in data.items() if k in names}
        for name in cls._time_fields:
            if name in kwargs:
                kwargs[name] = _parse_time(kwargs[name])
        return cls(**kwargs)


@dataclass(frozen=True, slots=True)
class TestResult(_RecordMixin):
    """One test cycle's outcome as the station judged it."""

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
    test_pressure_pa: float
    pressure_loss_pa: float
    leak_rate_sccm: float
    reject_limit_sccm: float
    fill_s: float
    stabilise_s: float
    test_s: float
    part_id: str | None = None
    reason: str = ""
    lower_limit_sccm: float | None = None
    temperature_c: float | None = None
    calibration_ref: str | None = None
    raw: str = ""
    profile: str = ""

    def __post_init__(self) -> None:
        # Every parsed line builds one of these, so the usual all-valid record is vouched for
        # in one expression (exact types only, the same bounds as below). Anything it does not
        # vouch for, valid or not, goes through _validate, which owns the rules and the errors.
        e, r, temp, inf = self.ended_at, self.received_at, self.temperature_c, _INF
        lo, hi = self.lower_limit_sccm, self.reject_limit_sccm
        if (
            type(self.station) is str and self.station.strip()
            and type(self.line) is str and self.line.strip()
            and type(self.program) is str and self.program.strip()
            and (self.part_id is None or (type(self.part_id) is str and self.part_id.strip()))
            and type(self.cycle) is int and self.cycle >= 0
            and type(e) is datetime and e.utcoffset() is not None
            and type(r) is datetime and r.utcoffset() is not None
            and type(self.verdict) is Verdict
            and type(self.test_pressure_pa) is float and -inf < self.test_pressure_pa < inf
            and type(self.pressure_loss_pa) is float and -inf < self.pressure_loss_pa < inf
            and type(self.leak_rate_sccm) is float and -inf < self.leak_rate_sccm < inf
            and type(hi) is float and -inf < hi < inf
            and (lo is None or (type(lo) is float and -inf < lo < hi))
            and type(self.fill_s) is float and 0.0 <= self.fill_s < inf
            and type(self.stabilise_s) is float and 0.0 <= self.stabilise_s < inf
            and type(self.test_s) is float and 0.0 <= self.test_s < inf
            and (temp is None or (type(temp) is float and -inf < temp < inf))
            and type(self.reason) is str and type(self.raw) is str
        ):  # fmt: skip
            if e.tzinfo is not UTC:
                object.__setattr__(self, "ended_at", e.astimezone(UTC))
            if r.tzinfo is not UTC:
                object.__setattr__(self, "received_at", r.astimezone(UTC))
            return
        self._validate()

    def _validate(self) -> None:
        _check_text("station", self.station)
        _check_text("line", self.line)
        _check_text("program", self.program)
        _check_text("part_id", self.part_id, optional=True)
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
        _check_number("test_pressure_pa", self.test_pressure_pa)
        _check_number("pressure_loss_pa", self.pressure_loss_pa)
        _check_number("leak_rate_sccm", self.leak_rate_sccm)
        _check_number("reject_limit_sccm", self.reject_limit_sccm)
        _check_number("lower_limit_sccm", self.lower_limit_sccm, optional=True)
        if self.lower_limit_sccm is not None and self.lower_limit_sccm >= self.reject_limit_sccm:
            raise ValueError(
                f"lower_limit_sccm ({self.lower_limit_sccm}) must be below "
                f"reject_limit_sccm ({self.reject_limit_sccm})"
            )
        for name in ("fill_s", "stabilise_s", "test_s"):
            _check_number(name, getattr(self, name), min_value=0.0)
        _check_number("temperature_c", self.temperature_c, optional=True)
        if not isinstance(self.reason, str) or not isinstance(self.raw, str):
            raise ValueError("reason and raw must be strings")

    @property
    def record_id(self) -> str:
        """Stable across re-reads and re-sends, so consumers can de-duplicate."""
        # the same text _stable_id joins, built in one step (this runs for every stored row)
        key = f"result|{self.station!s}|{self.cycle!s}|{_utc_iso(self.ended_at)}"
        return hashlib.blake2b(key.encode(), digest_size=12).hexdigest()


@dataclass(frozen=True, slots=True)
class CalibrationEvent(_RecordMixin):
    """A master-part calibration: the plain loss is the zero, the standard's loss the span."""

    kind: ClassVar[str] = "calibration"
    _time_fields: ClassVar[tuple[str, ...]] = ("ended_at", "received_at")

    station: str
    line: str
    ended_at: datetime
    received_at: datetime
    program: str
    master_loss_pa: float
    standard_loss_pa: float
    standard_sccm: float
    standard_ref_pressure_pa: float
    ratio: float
    sensitivity: float
    passed: bool
    reason: str = ""
    raw: str = ""
    profile: str = ""

    def __post_init__(self) -> None:
        _check_text("station", self.station)
        _check_text("line", self.line)
        _check_text("program", self.program)
        _check_time("ended_at", self.ended_at)
        _check_time("received_at", self.received_at)
        object.__setattr__(self, "ended_at", _to_utc(self.ended_at))
        object.__setattr__(self, "received_at", _to_utc(self.received_at))
        for name in ("master_loss_pa", "standard_loss_pa", "ratio", "sensitivity"):
            _check_number(name, getattr(self, name))
        _check_number("standard_sccm", self.standard_sccm, min_value=0.0)
        if self.standard_sccm == 0:
            raise ValueError("standard_sccm must be > 0 (a leak standard has a flow)")
        _check_number("standard_ref_pressure_pa", self.standard_ref_pressure_pa)
        if not isinstance(self.passed, bool):
            raise ValueError(f"passed must be true or false, got {self.passed!r}")

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


Record = TestResult | CalibrationEvent | StationStatus

_KINDS: dict[str, type[TestResult] | type[CalibrationEvent] | type[StationStatus]] = {
    "result": TestResult,
    "calibration": CalibrationEvent,
    "status": StationStatus,
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
