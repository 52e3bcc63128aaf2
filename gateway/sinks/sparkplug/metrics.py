"""Records → Sparkplug B metrics and payloads (pure: no I/O, no clock).

Metric names are ``<group>/<field>`` (``Result/leak_rate``), the engineering unit rides in the
metric's properties as ``engUnit`` (the property name host applications commonly read; the
Sparkplug specification names no unit key, so this is common practice). DataType codes are
those of the Sparkplug B specification (3.0, section "Datatypes").
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from datetime import datetime
from enum import IntEnum
from typing import Any

from gateway.records import CalibrationEvent, Record, StationStatus, TestResult
from gateway.sinks.sparkplug.payload_pb2 import Payload

__all__ = [
    "BD_SEQ",
    "DEVICE_METRICS",
    "REBIRTH",
    "DataType",
    "MetricDef",
    "birth_metrics",
    "encode",
    "ms",
    "node_birth",
    "node_death",
    "record_metrics",
    "wants_rebirth",
]

BD_SEQ = "bdSeq"
REBIRTH = "Node Control/Rebirth"


class DataType(IntEnum):
    """Sparkplug B datatype codes (the subset leakfleet sends)."""

    Int64 = 4
    UInt64 = 8
    Double = 10
    Boolean = 11
    String = 12
    DateTime = 13


@dataclass(frozen=True)
class MetricDef:
    name: str
    datatype: DataType
    unit: str | None
    kind: str  # the record kind that fills it
    get: Callable[[Any], object]


def ms(at: datetime) -> int:
    """Milliseconds since the Unix epoch, Sparkplug's time stamp."""
    return round(at.timestamp() * 1000)


def _result(field: str, dt: DataType, unit: str | None = None, name: str = "") -> MetricDef:
    return MetricDef(f"Result/{name or field}", dt, unit, "result", lambda r: getattr(r, field))


def _cal(name: str, dt: DataType, unit: str | None, get: Callable[[Any], object]) -> MetricDef:
    return MetricDef(f"Calibration/{name}", dt, unit, "calibration", get)


DEVICE_METRICS: tuple[MetricDef, ...] = (
    MetricDef("Result/ended_at", DataType.DateTime, None, "result", lambda r: ms(r.ended_at)),
    _result("cycle", DataType.Int64),
    _result("program", DataType.String),
    MetricDef("Result/verdict", DataType.String, None, "result", lambda r: r.verdict.value),
    _result("part_id", DataType.String),
    _result("leak_rate_sccm", DataType.Double, "sccm", "leak_rate"),
    _result("reject_limit_sccm", DataType.Double, "sccm", "reject_limit"),
    _result("pressure_loss_pa", DataType.Double, "Pa", "pressure_loss"),
    _result("test_pressure_pa", DataType.Double, "Pa", "test_pressure"),
    _result("fill_s", DataType.Double, "s", "fill_time"),
    _result("stabilise_s", DataType.Double, "s", "stabilise_time"),
    _result("test_s", DataType.Double, "s", "test_time"),
    MetricDef("Result/temperature", DataType.Double, "°C", "result", lambda r: r.temperature_c),
    _result("record_id", DataType.String),
    _cal("ended_at", DataType.DateTime, None, lambda c: ms(c.ended_at)),
    _cal("passed", DataType.Boolean, None, lambda c: c.passed),
    _cal("master_loss", DataType.Double, "Pa", lambda c: c.master_loss_pa),
    _cal("standard_loss", DataType.Double, "Pa", lambda c: c.standard_loss_pa),
    _cal("ratio", DataType.Double, None, lambda c: c.ratio),
    _cal("sensitivity", DataType.Double, "sccm/Pa", lambda c: c.sensitivity),
    _cal("record_id", DataType.String, None, lambda c: c.record_id),
    MetricDef("Status/state", DataType.String, None, "status", lambda s: s.state.value),
    MetricDef("Status/detail", DataType.String, None, "status", lambda s: s.detail),
    MetricDef("Status/record_id", DataType.String, None, "status", lambda s: s.record_id),
)


def _set(metric: Any, dt: DataType, value: object) -> None:
    if value is None:
        metric.is_null = True
    elif dt in (DataType.Int64, DataType.UInt64, DataType.DateTime):
        metric.long_value = int(value)  # type: ignore[call-overload]
    elif dt is DataType.Double:
        metric.double_value = float(value)  # type: ignore[arg-type]
    elif dt is DataType.Boolean:
        metric.boolean_value = bool(value)
    else:
        metric.string_value = str(value)


def _add(payload: Payload, name: str, dt: DataType, value: object, *, at: int | None = None,
         unit: str | None = None) -> None:
    metric = payload.metrics.add()
    metric.name = name
    metric.datatype = int(dt)
    if at is not None:
        metric.timestamp = at
    if unit:
        metric.properties.keys.append("engUnit")
        prop = metric.properties.values.add()
        prop.type = int(DataType.String)
        prop.string_value = unit
    _set(metric, dt, value)


def node_birth(bd_seq: int, now_ms: int) -> Payload:
    """NBIRTH: seq 0, the session's bdSeq and the rebirth control."""
    p = Payload(timestamp=now_ms, seq=0)
    _add(p, BD_SEQ, DataType.Int64, bd_seq)
    _add(p, REBIRTH, DataType.Boolean, False)
    return p


def node_death(bd_seq: int, now_ms: int) -> Payload:
    """NDEATH (the last will): the bdSeq of the NBIRTH it ends, no seq."""
    p = Payload(timestamp=now_ms)
    _add(p, BD_SEQ, DataType.Int64, bd_seq)
    return p


def birth_metrics(seq: int, now_ms: int, *, station: str, line: str,
                  last: Iterable[Record] = ()) -> Payload:
    """DBIRTH: every metric with datatype and unit; the station's latest values where known
    (``last``), null otherwise; the display names as ``Properties/...``."""
    p = Payload(timestamp=now_ms, seq=seq)
    latest = {r.kind: r for r in last}
    for d in DEVICE_METRICS:
        rec = latest.get(d.kind)
        _add(p, d.name, d.datatype, None if rec is None else d.get(rec), unit=d.unit)
    _add(p, "Properties/station", DataType.String, station)
    _add(p, "Properties/line", DataType.String, line)
    return p


def record_time(record: Record) -> datetime:
    if isinstance(record, StationStatus):
        return record.at
    assert isinstance(record, TestResult | CalibrationEvent)
    return record.ended_at


def record_metrics(seq: int, now_ms: int, record: Record) -> Payload:
    """DDATA for one record: its kind's metrics, stamped with the record's own time."""
    p = Payload(timestamp=now_ms, seq=seq)
    at = ms(record_time(record))
    for d in DEVICE_METRICS:
        if d.kind == record.kind:
            _add(p, d.name, d.datatype, d.get(record), at=at)
    return p


def encode(payload: Payload) -> bytes:
    return payload.SerializeToString()


def wants_rebirth(raw: bytes) -> bool:
    """An NCMD asking for a rebirth (``Node Control/Rebirth`` = true); ValueError if garbled."""
    from google.protobuf.message import DecodeError

    try:
        payload = Payload.FromString(raw)
    except DecodeError as exc:
        raise ValueError(f"NCMD payload is not a Sparkplug B payload: {exc}") from None
    return any(m.name == REBIRTH and m.HasField("boolean_value") and m.boolean_value
               for m in payload.metrics)


def metric_names(payload: Payload) -> Sequence[str]:
    return [m.name for m in payload.metrics]
