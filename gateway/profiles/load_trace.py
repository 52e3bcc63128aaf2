"""The loader's second pass over ``[trace]`` and ``[modbus.trace]``: what the schema cannot see.

The schema (``trace_schema``) checked the shape; here the names must agree with each other
(header columns named by ``when``, ``cycle``, ``role``, ``interval`` and ``phases``), units
must be known, roles and phases must be ones the record knows, and a Modbus curve must fit
the register space. Each mistake is one ConfigError line naming file and key.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from gateway.errors import DecodeError, UnitError
from gateway.profiles.load_fields import _Reader
from gateway.profiles.registers import parse_type, type_width
from gateway.profiles.trace_schema import PHASE_NAMES, TraceBlock, TraceLine
from gateway.records import TRACE_ROLES
from gateway.units import normalise_unit

__all__ = ["load_trace_block", "load_trace_line"]

_TIME_UNITS = ("s", "ms")


def _common(r: _Reader, path: str, spec: TraceLine | TraceBlock, has_interval: bool) -> None:
    try:
        normalise_unit(spec.samples.unit, "pressure")
    except UnitError as exc:
        r.fail(f"{path}.samples.unit", f"a pressure unit ({exc})", spec.samples.unit)
    if not has_interval and spec.interval_s is None:
        r.fail(f"{path}.interval", "where the sample interval comes from: interval = "
               "{ ... } or a fixed interval_s = 0.1 (missing)")
    for name in spec.phases:
        if name not in PHASE_NAMES:
            r.fail(f"{path}.phases.{name}", f"a phase the station starts: "
                   f"{', '.join(PHASE_NAMES)} (fill starts at the first sample)", name)
    role = spec.role
    if role is not None and role.codes is not None:
        for code, value in role.codes.items():
            if value not in TRACE_ROLES:
                r.fail(f"{path}.role.codes.{code}", f"one of {', '.join(TRACE_ROLES)}", value)


def load_trace_line(r: _Reader, doc: Mapping[str, Any], dialect: str) -> TraceLine | None:
    """``[trace]`` of a serial profile, checked; None when the profile has none."""
    if "trace" not in doc:
        return None
    spec = TraceLine.model_validate(doc["trace"])
    if dialect != "delimited":
        r.fail("trace", "a delimited dialect: curves are read from separated fields "
               f"(this profile's dialect is {dialect})")
    columns = spec.columns
    if len(set(columns)) != len(columns):
        r.fail("trace.columns", "distinct column names", columns)
    named = {"when.field": spec.when.field, "cycle": spec.cycle}
    if spec.role is not None:
        named["role.from"] = spec.role.from_
    if spec.interval is not None:
        named["interval.from"] = spec.interval.from_
        if spec.interval.unit not in (None, *_TIME_UNITS):
            r.fail("trace.interval.unit", "s or ms", spec.interval.unit)
    named |= {f"phases.{k}": v for k, v in spec.phases.items()}
    for key, column in named.items():
        if column not in columns:
            r.fail(f"trace.{key}", f"one of trace.columns ({', '.join(columns)})", column)
    if spec.when.equals is None and spec.when.matches is None:
        r.fail("trace.when", "equals = ... or matches = ... (what tells a curve's line)")
    if spec.layout == "block" and spec.end is None:
        r.fail("trace.end", "the line closing a block, e.g. { field = \"tag\", equals = "
               "\"END\" } (its first field is compared)")
    if spec.layout == "line" and spec.end is not None:
        r.fail("trace.end", "no end line for layout = \"line\" (the samples end with the line)")
    _common(r, "trace", spec, spec.interval is not None)
    return spec


def load_trace_block(r: _Reader, m: Mapping[str, Any]) -> TraceBlock | None:
    """``[modbus.trace]``, checked; None when the profile has none."""
    if "trace" not in m:
        return None
    spec = TraceBlock.model_validate(m["trace"])
    samples = spec.samples
    if samples.address is None or samples.type is None:
        r.fail("modbus.trace.samples", "address = ... and type = ... of the first sample")
    try:
        kind, _ = parse_type(samples.type)
    except DecodeError:
        r.fail("modbus.trace.samples.type", "int16, uint16, int32, uint32, float32 or float64",
               samples.type)
    if kind == "string":
        r.fail("modbus.trace.samples.type", "a number type", samples.type)
    end = samples.address + samples.max * type_width(samples.type)
    if end > 65536:
        room = (65536 - samples.address) // type_width(samples.type)
        r.fail("modbus.trace.samples.max", f"at most {room} samples from address "
               f"{samples.address} (the register space ends at 65535)", samples.max)
    if spec.interval is not None and spec.interval.unit not in (None, *_TIME_UNITS):
        r.fail("modbus.trace.interval.unit", "s or ms", spec.interval.unit)
    _common(r, "modbus.trace", spec, spec.interval is not None)
    return spec
