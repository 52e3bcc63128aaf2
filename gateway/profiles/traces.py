"""A station's pressure curve, from its header values and samples to a ``PressureTrace``. Pure.

The curve follows the record it belongs to, so the record ties it: a "result" curve takes the
time and program of the station's last result with the same cycle, a calibration's "master"
and "standard" curves those of its last calibration (both curves carry the calibration's
time; their roles tell them apart). A curve whose record the gateway did not see (it started
listening in between) is kept all the same, stamped with the gateway's receive time and saying
so (``time_source = "gateway"``).
"""

from __future__ import annotations

import itertools
import math
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta

from gateway.profiles.model import StationContext
from gateway.profiles.trace_schema import TraceBlock, TraceLine, TraceWhen
from gateway.records import TRACE_ROLES, CalibrationEvent, PressureTrace, TestResult
from gateway.units import to_canonical_fn

__all__ = ["TraceError", "TraceHeader", "build_trace", "header_from_line", "line_matcher",
           "sample_reader", "time_factor"]

_TIME = {"s": 1.0, "ms": 1e-3}


class TraceError(ValueError):
    """A curve that cannot be read (the raw text goes to quarantine with this reason)."""


@dataclass(frozen=True, slots=True)
class TraceHeader:
    """What a station says about a curve besides its samples."""

    cycle: int
    role: str
    interval_s: float
    phases: Mapping[str, float]  # phase → start, in the profile's phase_unit


def time_factor(unit: str | None) -> float:
    """Seconds per unit of a time header value (s when the profile names none)."""
    try:
        return _TIME[unit or "s"]
    except KeyError:
        raise TraceError(f"time unit must be s or ms, got {unit!r}") from None


def sample_reader(unit: str, scale: float) -> Callable[[float], float]:
    """Raw sample → gauge Pa (the loader checked the unit)."""
    to_pa = to_canonical_fn(unit, "pressure")
    return (lambda v: to_pa(v * scale)) if scale != 1.0 else to_pa


def line_matcher(when: TraceWhen, columns: Sequence[str]) -> Callable[[Sequence[str]], bool]:
    """Whether a split line is a trace header line (its ``when`` column matches)."""
    at = list(columns).index(when.field)
    values = ({when.equals} if isinstance(when.equals, str)
              else set(when.equals or ()))
    pattern = re.compile(when.matches) if when.matches is not None else None

    def matches(parts: Sequence[str]) -> bool:
        if at >= len(parts):
            return False
        if pattern is not None:
            return pattern.search(parts[at]) is not None
        return parts[at] in values

    return matches


def _number(text: str, what: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise TraceError(f"trace {what}: {text[:20]!r} is not a number") from None
    if not math.isfinite(value):
        raise TraceError(f"trace {what}: {text[:20]!r} is not a finite number")
    return value


def _role(raw: str, codes: Mapping[str, str] | None) -> str:
    role = codes.get(raw) if codes is not None else raw
    if role not in TRACE_ROLES:
        raise TraceError(f"trace role: {raw!r} is not one of the profile's codes")
    return role


def header_from_line(spec: TraceLine, parts: Sequence[str]) -> TraceHeader:
    """The header of a trace line (or block's first line), split into fields."""
    columns = spec.columns
    if len(parts) < len(columns):
        raise TraceError(f"trace line has {len(parts)} fields, its header alone has "
                         f"{len(columns)}")
    raw = dict(zip(columns, parts, strict=False))
    cycle = _number(raw[spec.cycle], "cycle")
    if cycle < 0 or cycle != int(cycle):
        raise TraceError(f"trace cycle: {raw[spec.cycle]!r} is not a cycle number")
    role = _role(raw[spec.role.from_], spec.role.codes) if spec.role is not None else "result"
    if spec.interval is not None:
        interval = _number(raw[spec.interval.from_], "interval") * time_factor(spec.interval.unit)
    else:
        interval = spec.interval_s or 0.0
    phases = {name: _number(raw[column], f"{name} start") for name, column in spec.phases.items()}
    return TraceHeader(int(cycle), role, interval, phases)


def header_from_registers(spec: TraceBlock, values: Mapping[str, int]) -> TraceHeader:
    """The header of a Modbus trace block; ``values`` are the decoded header registers."""
    role = (_role(str(values["role"]), spec.role.codes) if spec.role is not None else "result")
    if spec.interval is not None:
        interval = values["interval"] * time_factor(spec.interval.unit)
    else:
        interval = spec.interval_s or 0.0
    phases = {name: float(values[f"phase:{name}"]) for name in spec.phases}
    return TraceHeader(values["cycle"], role, interval, phases)


def build_trace(
    header: TraceHeader,
    samples_pa: Sequence[float],
    *,
    phase_unit: str,
    ctx: StationContext,
    label: str,
    tied: TestResult | CalibrationEvent | None,
    received_at: datetime,
) -> PressureTrace:
    """The record: phases in seconds from the first sample, tied to its result/calibration."""
    if not header.interval_s > 0:
        raise TraceError(f"trace interval must be above 0 s, got {header.interval_s:g} s")
    if len(samples_pa) < 2:
        raise TraceError(f"a trace needs at least 2 samples, got {len(samples_pa)}")
    per = header.interval_s if phase_unit == "sample" else _TIME[phase_unit]
    duration = (len(samples_pa) - 1) * header.interval_s
    phases: list[tuple[str, float]] = [("fill", 0.0)]
    for name in ("stabilise", "test", "dump"):
        if name in header.phases:
            at = header.phases[name] * per
            if not 0 <= at <= duration + 1e-9:
                raise TraceError(f"trace {name} starts at {at:g} s, outside the curve's "
                                 f"{duration:g} s")
            phases.append((name, at))
    phases.append(("end", duration))
    if any(b[1] < a[1] for a, b in itertools.pairwise(phases)):
        raise TraceError("trace phases are not in time order (fill, stabilise, test, dump)")
    if tied is not None:
        ended, program, source = tied.ended_at, tied.program, tied.time_source
    else:
        ended, program, source = received_at, ctx.default_program, "gateway"
    test_end = dict(phases).get("dump", duration)
    try:
        return PressureTrace(
            station=ctx.station, line=ctx.line, cycle=header.cycle, ended_at=ended,
            received_at=received_at, started_at=ended - timedelta(seconds=test_end),
            sample_interval_s=header.interval_s, pressures_pa=tuple(samples_pa),
            phases=tuple(phases), role=header.role, program=program, profile=label,
            time_source=source,
        )  # fmt: skip
    except ValueError as exc:
        raise TraceError(f"trace: {exc}") from None


def tie(role: str, cycle: int, last_result: TestResult | None,
        last_calibration: CalibrationEvent | None) -> TestResult | CalibrationEvent | None:
    """The record a curve belongs to, if the gateway saw it."""
    if role == "result":
        return last_result if last_result is not None and last_result.cycle == cycle else None
    return last_calibration
