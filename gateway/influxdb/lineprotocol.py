"""InfluxDB line protocol for canonical records: pure encoding, no I/O.

Schema (our names): measurements ``leak_results``, ``leak_calibrations``, ``station_status``,
``pressure_traces``. A pressure curve is one point, not one per sample: its samples are the
field ``pressures_pa``, gauge Pa as comma-separated decimals in the shortest form that reads back
to the same double (lossless; Flux's ``strings.split`` and any CSV reader take it apart), its
phase starts the JSON field ``phases``; ``role`` (result, master, standard) is a tag.
``alarm_events``: one point per alarm change (raised, acknowledged, cleared) at its time, tagged
by rule, severity, change and key (keys are few: a rule per station, program or sink), so a
Grafana panel can count or list them; fleet-wide alarms carry no line or station tag.
Tags are only the low-cardinality keys a dashboard groups by (site, line, station, program,
verdict); everything else, the part serial number included, is a field, because every distinct
tag value makes a new series. The timestamp is the record's own time (``ended_at``; ``at`` for a
status) in ns, so re-sending a record writes the same point again: InfluxDB keeps one point per
(measurement, tag set, timestamp) and overwrites its fields, which makes re-sends idempotent.

Escaping follows the InfluxDB line protocol reference ("Special characters"):
https://docs.influxdata.com/influxdb/v1.6/write_protocols/line_protocol_reference/
- measurement: comma and space are escaped with a backslash;
- tag keys, tag values and field keys: comma, equals sign and space;
- string field values are double-quoted, with double quote and backslash escaped.
The reference says newlines are not supported in tag or field values, so a newline, carriage
return or tab becomes a space in names and tags, and a newline / carriage return the two
characters ``\\n`` / ``\\r`` in string fields (raw audit text stays readable). A tag value may
not be empty (the tag is omitted) nor end in a backslash (which would escape the separator
after it; a trailing backslash is dropped).
"""

from __future__ import annotations

import functools
import json
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime, timedelta

from gateway.records import (
    AlarmEvent,
    CalibrationEvent,
    PressureTrace,
    Record,
    StationStatus,
    TestResult,
)

__all__ = [
    "MEASUREMENTS",
    "PARTS_MEASUREMENT",
    "PART_HOURS_MEASUREMENT",
    "encode",
    "encode_line",
    "escape_field_key",
    "escape_measurement",
    "escape_tag",
    "field_string",
    "record_line",
    "timestamp_ns",
]

MEASUREMENTS = {
    "result": "leak_results",
    "calibration": "leak_calibrations",
    "status": "station_status",
    "trace": "pressure_traces",
    "alarm": "alarm_events",
}

#: the journal's part summaries mirrored by the sink (gateway.sinks.influx_parts) and read by
#: the store (gateway.store.influx_parts)
PARTS_MEASUREMENT = "leak_parts"
PART_HOURS_MEASUREMENT = "leak_part_hours"

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
FieldValue = bool | int | float | str


def timestamp_ns(at: datetime) -> int:
    """Exact ns since the epoch (integer arithmetic: a float would lose the microseconds)."""
    return ((at - _EPOCH) // timedelta(microseconds=1)) * 1000


def _no_newlines(text: str) -> str:
    return text.replace("\r", " ").replace("\n", " ").replace("\t", " ")


def escape_measurement(name: str) -> str:
    return _no_newlines(name).replace(",", r"\,").replace(" ", r"\ ")


@functools.lru_cache(maxsize=4096)
def escape_tag(text: str) -> str:
    """For tag keys and values (comma, equals sign, space). Cached: field keys are fixed and
    tag values few (site, line, station, program, verdict), and a record has ~30 of them."""
    text = _no_newlines(text).rstrip("\\")
    return text.replace(",", r"\,").replace("=", r"\=").replace(" ", r"\ ")


escape_field_key = escape_tag


def field_string(text: str) -> str:
    """A quoted string field value."""
    text = text.replace("\\", "\\\\").replace('"', '\\"')
    return '"' + text.replace("\n", "\\n").replace("\r", "\\r") + '"'


def _field_value(value: FieldValue) -> str:
    if isinstance(value, bool):  # before int: bool is an int in Python
        return "true" if value else "false"
    if isinstance(value, int):
        return f"{value}i"
    if isinstance(value, float):
        return repr(value)  # shortest round-trip form; "1e-05" is valid line protocol
    return field_string(value)


def encode_line(
    measurement: str,
    tags: Mapping[str, str | None],
    fields: Mapping[str, FieldValue | None],
    ts_ns: int,
) -> str:
    """One point. Tags sorted by key (the reference's performance tip); ``None`` is omitted."""
    tag_part = "".join(
        f",{escape_tag(k)}={escape_tag(v)}"
        for k, v in sorted(tags.items())
        if v is not None and escape_tag(v)
    )
    field_part = ",".join(
        f"{escape_field_key(k)}={_field_value(v)}" for k, v in fields.items() if v is not None
    )
    if not field_part:
        raise ValueError(f"a {measurement} point needs at least one field")
    return f"{escape_measurement(measurement)}{tag_part} {field_part} {ts_ns}"


def _f(value: float | None) -> float | None:
    """Numbers that are floats in the schema stay floats on the wire (``200000`` → ``200000.0``),
    so a field never changes type between points (InfluxDB refuses that)."""
    return None if value is None else float(value)


def _supplied(pairs: tuple[tuple[str, str], ...]) -> str | None:
    """The journal's JSON text of the values not sent by the station (omitted when none)."""
    return json.dumps(dict(pairs), separators=(",", ":")) if pairs else None


def record_line(
    record: Record, *, site: str, line: str | None = None, seq: int | None = None
) -> str:
    """The point for one record; ``line`` names a status's line (statuses do not carry it)."""
    tags: dict[str, str | None]
    if isinstance(record, TestResult):
        tags = {
            "site": site,
            "line": record.line,
            "station": record.station,
            "program": record.program,
            "verdict": record.verdict.value,
        }
        fields: dict[str, FieldValue | None] = {
            "cycle": record.cycle,
            "part_id": record.part_id,
            "leak_rate_sccm": _f(record.leak_rate_sccm),
            "pressure_loss_pa": _f(record.pressure_loss_pa),
            "test_pressure_pa": _f(record.test_pressure_pa),
            "reject_limit_sccm": _f(record.reject_limit_sccm),
            "lower_limit_sccm": _f(record.lower_limit_sccm),
            "fill_s": _f(record.fill_s),
            "stabilise_s": _f(record.stabilise_s),
            "test_s": _f(record.test_s),
            "temperature_c": _f(record.temperature_c),
            "calibration_ref": record.calibration_ref,
            "reason": record.reason,
            "profile": record.profile,
            "raw": record.raw,
            "part_family": record.part_family,
            "time_source": record.time_source,
            "supplied": _supplied(record.supplied),
        }
        at = record.ended_at
    elif isinstance(record, CalibrationEvent):
        tags = {
            "site": site,
            "line": record.line,
            "station": record.station,
            "program": record.program,
        }
        fields = {
            "master_loss_pa": _f(record.master_loss_pa),
            "standard_loss_pa": _f(record.standard_loss_pa),
            "standard_sccm": _f(record.standard_sccm),
            "standard_ref_pressure_pa": _f(record.standard_ref_pressure_pa),
            "ratio": _f(record.ratio),
            "sensitivity": _f(record.sensitivity),
            "passed": record.passed,
            "reason": record.reason,
            "profile": record.profile,
            "raw": record.raw,
            "time_source": record.time_source,
            "supplied": _supplied(record.supplied),
        }
        at = record.ended_at
    elif isinstance(record, PressureTrace):
        tags = {"site": site, "line": record.line, "station": record.station,
                "program": record.program, "role": record.role}
        fields = {
            "cycle": record.cycle,
            "sample_interval_s": _f(record.sample_interval_s),
            "samples": len(record.pressures_pa),
            "pressures_pa": ",".join(map(repr, record.pressures_pa)),
            "phases": json.dumps([list(p) for p in record.phases], separators=(",", ":")),
            "started_at_ns": timestamp_ns(record.started_at),
            "profile": record.profile,
            "time_source": record.time_source,
        }
        at = record.ended_at
    elif isinstance(record, StationStatus):
        tags = {"site": site, "line": line, "station": record.station}
        fields = {"state": record.state.value, "detail": record.detail}
        at = record.at
    elif isinstance(record, AlarmEvent):
        tags = {"site": site, "line": line, "station": record.station, "rule": record.rule,
                "severity": record.severity, "change": record.change, "key": record.key}
        fields = {"alarm_id": record.alarm_id, "state": record.state,
                  "message": record.message, "by": record.by,
                  "since_ns": timestamp_ns(record.since)}
        at = record.at
    else:  # pragma: no cover - the Record union is closed
        raise TypeError(f"not a record: {type(record).__name__}")
    if not isinstance(record, StationStatus | AlarmEvent):
        fields["received_at_ns"] = timestamp_ns(record.received_at)
    fields["record_id"] = record.record_id
    fields["seq"] = seq
    return encode_line(MEASUREMENTS[record.kind], tags, fields, timestamp_ns(at))


def encode(
    rows: Iterable[tuple[int, Record]], *, site: str, lines: Mapping[str, str] | None = None
) -> str:
    """A write body: one point per ``(seq, record)``, newline-separated."""
    lines = lines or {}
    return "\n".join(
        record_line(rec, site=site, line=lines.get(rec.station or ""), seq=seq)
        for seq, rec in rows
    )
