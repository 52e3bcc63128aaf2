"""Raw fields → canonical values → a record, or a Rejected that says exactly what was wrong.

Nothing here raises for bad input: every problem becomes a ``FieldError`` inside and a
``Rejected`` outside, naming the canonical field, the raw field it came from and what was expected.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime, tzinfo
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.calibration import Calibration
from gateway.errors import DecodeError, UnitError
from gateway.profiles.model import FieldSpec, Parsed, StationContext
from gateway.profiles.registers import decode_registers, registers_hex
from gateway.records import CalibrationEvent, Rejected, TestResult, Verdict
from gateway.units import to_canonical

if TYPE_CHECKING:
    from gateway.profiles.model import BlockSpec, ModbusSpec, RingSpec

__all__ = ["FieldError", "build_record", "convert_register", "convert_text", "decode_block",
           "reject"]

_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d{1,3})?$")
_INT = re.compile(r"^[+-]?\d{1,18}$")
_DEFAULT_UNITS = {"time": "s", "temperature": "C"}
_QUANTITY_KINDS = {"pressure", "leak", "time", "temperature"}
_RAW_LIMIT = 4096  # longest raw text kept in a Rejected; the rest is summarised


class FieldError(DecodeError):
    """One field could not be converted; the message is the rejection reason."""


def _label(spec: FieldSpec) -> str:
    if spec.source is not None and spec.source != spec.canonical:
        return f"{spec.canonical} (from {spec.source!r})"
    if spec.register is not None:
        return f"{spec.canonical} (register +{spec.register.at} {spec.register.type})"
    return spec.canonical


def _fail(spec: FieldSpec, what: str) -> FieldError:
    return FieldError(f"{_label(spec)}: {what}")


def _show(text: str, limit: int = 40) -> str:
    return repr(text if len(text) <= limit else text[:limit] + "…")


def clip_raw(text: str) -> str:
    if len(text) <= _RAW_LIMIT:
        return text
    return text[:_RAW_LIMIT] + f"…(+{len(text) - _RAW_LIMIT} chars)"


def reject(ctx: StationContext, label: str, raw: str, reason: str, received_at: datetime,
           line_no: int | None = None) -> Rejected:
    return Rejected(station=ctx.station, profile=label, raw=clip_raw(raw), reason=reason,
                    received_at=received_at, line_no=line_no)


def _zone(spec: FieldSpec, ctx: StationContext) -> tzinfo:
    name = spec.timezone or ctx.timezone
    if name.upper() == "UTC":
        return UTC
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise _fail(spec, f"unknown time zone {name!r}") from None


def _timestamp(spec: FieldSpec, value: int | float | str, ctx: StationContext) -> datetime:
    fmt = spec.time_format or "iso"
    if fmt == "unix":
        if isinstance(value, str):
            if not _NUMBER.match(value):
                raise _fail(spec, f"{_show(value)} is not UNIX seconds")
            value = float(value)
        seconds = _scaled(spec, value)
        try:
            return datetime.fromtimestamp(seconds, UTC)
        except (OverflowError, OSError, ValueError):
            raise _fail(spec, f"{seconds!r} is not a usable UNIX time") from None
    if not isinstance(value, str):
        raise _fail(spec, f"expected timestamp text, got {value!r}")
    try:
        if fmt == "iso":
            text = value[:-1] + "+00:00" if value.endswith(("Z", "z")) else value
            parsed = datetime.fromisoformat(text)
        else:
            parsed = datetime.strptime(value, fmt)
    except ValueError:
        expected = "ISO 8601" if fmt == "iso" else repr(fmt)
        raise _fail(spec, f"{_show(value)} is not a timestamp in format {expected}") from None
    if parsed.tzinfo is None:
        parsed = parsed.replace(tzinfo=_zone(spec, ctx))
    return parsed


def _scaled(spec: FieldSpec, number: float) -> float:
    """number × scale + offset, without the binary noise of e.g. 217 × 0.1 = 21.700000000000003."""
    if spec.scale == 1.0 and spec.offset == 0.0:
        return number
    value = number * spec.scale + spec.offset
    return float(f"{value:.12g}") if math.isfinite(value) else value


def _quantity(spec: FieldSpec, number: float, unit: str | None, reference_c: float) -> float:
    unit = unit or spec.unit or _DEFAULT_UNITS.get(spec.kind)
    if unit is None:  # the loader prevents this; keep the promise of never raising anyway
        raise _fail(spec, "no unit")
    value = _scaled(spec, number)
    try:
        out = to_canonical(value, unit, spec.kind, reference_c=reference_c)  # type: ignore[arg-type]
    except UnitError as exc:
        raise _fail(spec, str(exc)) from None
    if not math.isfinite(out):
        raise _fail(spec, f"{number!r} is not a finite number")
    return out


def _coded(spec: FieldSpec, key: str) -> Any:
    codes = spec.codes or {}
    if key not in codes:
        known = ", ".join(codes)
        raise _fail(spec, f"unknown code {_show(key)}; expected one of {known}")
    return codes[key]


def convert_text(
    spec: FieldSpec,
    raw: Mapping[str, str],
    ctx: StationContext,
    reference_c: float = 0.0,
) -> Any:
    """Canonical value of one field from the raw text fields of a line or answer block."""
    assert spec.source is not None
    text = raw.get(spec.source)
    if text is None:
        if spec.empty_none:
            return None
        raise _fail(spec, "missing")
    if text == "":
        if spec.empty_none:
            return None
        raise _fail(spec, "empty")
    kind = spec.kind
    if kind == "timestamp":
        return _timestamp(spec, text, ctx)
    if kind == "int":
        if not _INT.match(text):
            raise _fail(spec, f"{_show(text)} is not an integer")
        number = int(text)
        if number < 0:
            raise _fail(spec, f"{number} is negative")
        return number
    if kind == "text":
        return text
    if kind == "program":
        if spec.program_lookup and _INT.match(text) and int(text) in ctx.programs:
            return ctx.programs[int(text)]
        return text
    if kind in ("verdict", "bool"):
        return _coded(spec, text)
    if not _NUMBER.match(text):
        raise _fail(spec, f"{_show(text)} is not a number")
    number_f = float(text)
    if kind == "number":
        value = _scaled(spec, number_f)
        if not math.isfinite(value):
            raise _fail(spec, f"{_show(text)} is not a finite number")
        return value
    unit = None
    if spec.unit_from is not None:
        unit = raw.get(spec.unit_from)
        if not unit:
            raise _fail(spec, f"unit field {spec.unit_from!r} is missing or empty")
    return _quantity(spec, number_f, unit, reference_c)


def convert_register(
    spec: FieldSpec,
    block: Sequence[int],
    ctx: StationContext,
    reference_c: float = 0.0,
    encoding: str = "ascii",
) -> Any:
    """Canonical value of one field from its registers inside ``block``."""
    reg = spec.register
    assert reg is not None
    words = list(block[reg.at : reg.at + reg.width])
    try:
        value = decode_registers(words, reg.type, word_order=reg.word_order,
                                 byte_order=reg.byte_order, encoding=encoding)
    except DecodeError as exc:
        raise _fail(spec, str(exc)) from None
    is_null = False
    if isinstance(value, float) and math.isnan(value):
        if reg.null is None or not (isinstance(reg.null, float) and math.isnan(reg.null)):
            raise _fail(spec, "is NaN (declare null = \"nan\" if NaN means no value)")
        is_null = True
    elif isinstance(value, str):
        is_null = value == ""
    elif reg.null is not None and value == reg.null:
        is_null = True
    if is_null:
        if spec.empty_none:
            return None
        raise _fail(spec, f"holds the null value {value!r} but the field is required")
    kind = spec.kind
    if kind == "timestamp":
        return _timestamp(spec, value, ctx)
    if kind in ("verdict", "bool"):
        return _coded(spec, str(value))
    if kind == "program":
        if isinstance(value, int):
            return ctx.programs.get(value, str(value))
        return value
    if kind == "text":
        return str(value)
    if isinstance(value, str):
        raise _fail(spec, f"expected a number, got text {_show(value)}")
    if kind == "int":
        if not isinstance(value, int) or value < 0:
            raise _fail(spec, f"{value!r} is not a non-negative integer")
        return value
    if kind == "number":
        out = _scaled(spec, value)
        if not math.isfinite(out):
            raise _fail(spec, f"{value!r} is not a finite number")
        return out
    if not math.isfinite(value):
        raise _fail(spec, f"{value!r} is not a finite number")
    return _quantity(spec, float(value), None, reference_c)


def _derive_calibration(values: dict[str, Any]) -> None:
    """Fill ratio and sensitivity from the losses when the station did not send them.

    A failed calibration can have standard_loss <= master_loss; then there is no span, the
    sensitivity is recorded as 0, the event is marked not passed and the reason says why.
    """
    master, standard, flow = (values["master_loss_pa"], values["standard_loss_pa"],
                              values["standard_sccm"])
    notes = []
    try:
        cal = Calibration(master, standard, flow)
    except ValueError:
        cal = None
    if values.get("ratio") is None:
        if master > 0:
            values["ratio"] = standard / master
        else:
            values["ratio"] = 0.0
            notes.append(f"ratio undefined (master loss {master:g} Pa), recorded as 0")
    if values.get("sensitivity") is None:
        if cal is not None:
            values["sensitivity"] = cal.sensitivity
        else:
            values["sensitivity"] = 0.0
            notes.append(
                f"no span: standard loss {standard:g} Pa <= master loss {master:g} Pa, "
                "sensitivity recorded as 0"
            )
    if cal is None:
        if values.get("passed"):
            notes.append("station reported passed; marked failed")
        values["passed"] = False
    if notes:
        reason = values.get("reason") or ""
        values["reason"] = "; ".join([reason, *notes] if reason else notes)


def build_record(
    record: str,
    values: dict[str, Any],
    ctx: StationContext,
    label: str,
    raw: str,
    received_at: datetime,
    line_no: int | None,
) -> Parsed:
    """A TestResult/CalibrationEvent from canonical values, or Rejected if they don't fit."""
    common: dict[str, Any] = {
        "station": ctx.station,
        "line": ctx.line,
        "received_at": received_at,
        "raw": clip_raw(raw),
        "profile": label,
    }
    present: dict[str, Any] = {k: v for k, v in values.items() if v is not None}
    try:
        if record == "result":
            present["verdict"] = Verdict(present["verdict"])
            return TestResult(**common, **present)
        if isinstance(present.get("standard_sccm"), float) and present["standard_sccm"] <= 0:
            raise ValueError(f"standard_sccm must be > 0, got {present['standard_sccm']:g}")
        _derive_calibration(present)
        return CalibrationEvent(**common, **present)
    except (ValueError, TypeError, KeyError) as exc:
        return reject(ctx, label, raw, f"{record} not valid: {exc}", received_at, line_no)


def decode_block(
    spec: ModbusSpec,
    record: str,
    block: RingSpec | BlockSpec,
    address: int,
    regs: Sequence[int],
    expected: int,
    ctx: StationContext,
    received_at: datetime,
) -> Parsed:
    """A result slot or calibration block → record, after checking length and both guards."""
    raw = registers_hex(address, regs)
    label = spec.profile_label
    try:
        words = list(regs)
    except TypeError:
        return reject(ctx, label, repr(regs), "registers are not a list", received_at)
    if len(words) != block.length:
        return reject(ctx, label, raw, f"{record} block has {len(words)} registers, expected "
                      f"{block.length}", received_at)
    for i, word in enumerate(words):
        if isinstance(word, bool) or not isinstance(word, int) or not 0 <= word <= 0xFFFF:
            return reject(ctx, label, raw, f"register +{i} is {word!r}, expected 0..65535",
                          received_at)
    width = block.counter_registers
    guards = []
    for at in (block.head_guard, block.tail_guard):
        value = decode_registers(words[at : at + width], block.counter_type,
                                 word_order=block.word_order, byte_order=block.byte_order)
        guards.append(value)
    noun = "cycle" if record == "result" else "calibration counter"
    if guards[0] != expected or guards[1] != expected:
        return reject(ctx, label, raw, f"torn block: head guard {guards[0]}, tail guard "
                      f"{guards[1]}, expected {noun} {expected}", received_at)
    values: dict[str, Any] = {}
    try:
        for fspec in block.fields:
            values[fspec.canonical] = convert_register(
                fspec, words, ctx, spec.leak_reference_c, spec.string_encoding
            )
    except FieldError as exc:
        return reject(ctx, label, raw, str(exc), received_at)
    if record == "result":
        values["cycle"] = expected
    return build_record(record, values, ctx, label, raw, received_at, None)
