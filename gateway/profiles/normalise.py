"""Raw fields → canonical values → a record, or a Rejected that says exactly what was wrong.

Nothing here raises for bad input: every problem becomes a ``FieldError`` inside and a
``Rejected`` outside, naming the canonical field, the raw field it came from and what was expected.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime, tzinfo
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.calibration import Calibration
from gateway.errors import DecodeError, UnitError
from gateway.profiles.model import (
    BlockSpec,
    Decoded,
    FieldSpec,
    ModbusSpec,
    RingSpec,
    StationContext,
)
from gateway.profiles.registers import decode_registers, registers_hex
from gateway.programs import complete
from gateway.records import CalibrationEvent, Rejected, TestResult, Verdict
from gateway.units import same_value, to_canonical, to_canonical_fn

__all__ = ["FieldError", "TextConverter", "build_record", "compile_text_field",
           "convert_register", "convert_text", "decode_block", "finish_register", "make_record",
           "register_null", "reject"]

_NUMBER = re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d{1,3})?$")
_INT = re.compile(r"^[+-]?\d{1,18}$")
_DEFAULT_UNITS = {"time": "s", "temperature": "C"}
_QUANTITY_KINDS = {"pressure", "leak", "time", "temperature"}
_VERDICTS = frozenset(v.value for v in Verdict)
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
    if text and spec.number is not None:
        text = spec.number.plain(text)
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


#: a compiled ``convert_text`` for one field: (the field's raw text or None, all raw fields)
TextConverter = Callable[[str | None, Mapping[str, str]], Any]

# strptime directives the fixed-width fast path reads: (datetime argument, digits)
_FIXED_DIRECTIVES = {"Y": (0, 4), "m": (1, 2), "d": (2, 2), "H": (3, 2), "M": (4, 2), "S": (5, 2)}


#: year, month, day, hour, minute, second
_TimeFields = tuple[int, int, int, int, int, int]


def _fixed_time_reader(fmt: str) -> Callable[[str], _TimeFields | None] | None:
    """A reader of ``fmt``'s zero-padded ASCII form (strptime is ~6 µs a call), or None.

    Only for patterns of %Y %m %d (required) and %H %M %S, each once, between literal
    characters that are neither digits nor whitespace other than a single space. Text in
    exactly that form splits only one way for strptime too (no field can be longer), so both
    read the same numbers; anything else (one-digit fields, other spaces, Unicode digits)
    returns None and goes to strptime, which decides as before.
    """
    pattern: list[str] = []
    order: list[int] = []
    i = 0
    while i < len(fmt):
        ch = fmt[i]
        if ch == "%":
            spec = _FIXED_DIRECTIVES.get(fmt[i + 1 : i + 2])
            if spec is None or spec[0] in order:
                return None
            order.append(spec[0])
            pattern.append(f"([0-9]{{{spec[1]}}})")
            i += 2
            continue
        if ch.isdigit() or (ch.isspace() and ch != " ") or not ch.isascii():
            return None
        pattern.append(re.escape(ch))
        i += 1
    if not {0, 1, 2} <= set(order):
        return None
    match = re.compile("".join(pattern)).fullmatch
    slots = tuple(order)
    if slots == (0, 1, 2, 3, 4, 5):  # all six, already in datetime's argument order

        def read_in_order(text: str) -> _TimeFields | None:
            m = match(text)
            if m is None:
                return None
            year, month, day, hour, minute, second = map(int, m.groups())
            return year, month, day, hour, minute, second

        return read_in_order

    def read(text: str) -> _TimeFields | None:
        m = match(text)
        if m is None:
            return None
        args = [0, 0, 0, 0, 0, 0]
        for slot, digits in zip(slots, m.groups(), strict=True):
            args[slot] = int(digits)
        year, month, day, hour, minute, second = args
        return year, month, day, hour, minute, second

    return read


def _compile_timestamp(spec: FieldSpec, ctx: StationContext) -> Callable[[str], datetime] | None:
    fmt = spec.time_format or "iso"
    if fmt in ("iso", "unix"):
        return None  # fromisoformat is already fast; unix goes the generic way
    reader = _fixed_time_reader(fmt)
    if reader is None:
        return None
    try:
        zone = _zone(spec, ctx)
    except FieldError:
        return None  # the generic path rejects every line with the zone's error, as before

    def convert(text: str) -> datetime:
        args = reader(text)
        if args is None:
            return _timestamp(spec, text, ctx)
        year, month, day, hour, minute, second = args
        try:
            return datetime(year, month, day, hour, minute, second, tzinfo=zone)
        except ValueError:
            raise _fail(spec, f"{_show(text)} is not a timestamp in format {fmt!r}") from None

    return convert


def compile_text_field(
    spec: FieldSpec, ctx: StationContext, reference_c: float = 0.0
) -> tuple[TextConverter, bool]:
    """``_compile_text_field`` with the field's number writing (decimal comma, thousands,
    trailing sign, placeholders) made plain first."""
    convert, wants_raw = _compile_text_field(spec, ctx, reference_c)
    number = spec.number
    if number is None:
        return convert, wants_raw
    plain = number.plain

    def plain_first(text: str | None, raw: Mapping[str, str]) -> Any:
        return convert(plain(text) if text else text, raw)

    return plain_first, wants_raw


def _compile_text_field(
    spec: FieldSpec, ctx: StationContext, reference_c: float = 0.0
) -> tuple[TextConverter, bool]:
    """``convert_text`` for one field with its per-field work done once, and whether it
    reads other raw fields than its own (then the caller must pass them all).

    The compiled converter gives the same value (for a verdict, the ``Verdict`` member of the
    code's text, which ``make_record`` would make anyway) or the same FieldError as
    ``convert_text`` for every input: the same checks in the same order, with the unit
    factor, zone and code table resolved here; what it does not specialise it hands to
    ``convert_text``.
    """
    assert spec.source is not None
    empty_none = spec.empty_none
    kind = spec.kind

    def generic(text: str | None, raw: Mapping[str, str]) -> Any:
        return convert_text(spec, raw, ctx, reference_c)

    def blank(text: str | None) -> None:
        if empty_none:
            return None
        raise _fail(spec, "missing" if text is None else "empty")

    if kind == "text" or (kind == "program" and not spec.program_lookup):

        def as_text(text: str | None, raw: Mapping[str, str]) -> Any:
            return text if text else blank(text)

        return as_text, False
    if kind == "int":
        int_match = _INT.match

        def as_int(text: str | None, raw: Mapping[str, str]) -> Any:
            if not text:
                return blank(text)
            if not int_match(text):
                raise _fail(spec, f"{_show(text)} is not an integer")
            number = int(text)
            if number < 0:
                raise _fail(spec, f"{number} is negative")
            return number

        return as_int, False
    if kind in ("verdict", "bool"):
        codes: dict[str, Any] = dict(spec.codes or {})
        if kind == "verdict":  # the member build_record would make of the code's text
            codes = {k: Verdict(v) if v in _VERDICTS else v for k, v in codes.items()}

        def as_code(text: str | None, raw: Mapping[str, str]) -> Any:
            if not text:
                return blank(text)
            try:
                return codes[text]
            except KeyError:
                return _coded(spec, text)  # raises the unknown-code error

        return as_code, False
    if kind == "timestamp":
        stamp = _compile_timestamp(spec, ctx)
        if stamp is None:
            return generic, True

        def as_time(text: str | None, raw: Mapping[str, str]) -> Any:
            return stamp(text) if text else blank(text)

        return as_time, False
    if kind in _QUANTITY_KINDS and spec.unit_from is None:
        unit = spec.unit or _DEFAULT_UNITS.get(kind)
        if unit is None:
            return generic, True  # every value fails with "no unit", as before
        try:
            to_unit = to_canonical_fn(unit, kind, reference_c=reference_c)  # type: ignore[arg-type]
        except UnitError:
            return generic, True  # every value fails with the unit's error, as before
        number_match = _NUMBER.match
        isfinite = math.isfinite
        plain = spec.scale == 1.0 and spec.offset == 0.0
        if plain and to_unit is same_value:

            def as_canonical(text: str | None, raw: Mapping[str, str]) -> Any:
                if not text:
                    return blank(text)
                if not number_match(text):
                    raise _fail(spec, f"{_show(text)} is not a number")
                number = float(text)
                if not isfinite(number):
                    raise _fail(spec, f"{number!r} is not a finite number")
                return number

            return as_canonical, False

        def as_quantity(text: str | None, raw: Mapping[str, str]) -> Any:
            if not text:
                return blank(text)
            if not number_match(text):
                raise _fail(spec, f"{_show(text)} is not a number")
            number = float(text)
            out = to_unit(number if plain else _scaled(spec, number))
            if not isfinite(out):
                raise _fail(spec, f"{number!r} is not a finite number")
            return out

        return as_quantity, False
    return generic, True


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
    if spec.kind == "timestamp" and spec.time_format in ("ymdhms", "bcd-ymdhms"):
        return _register_time(spec, words, ctx)
    try:
        value = decode_registers(words, reg.type, word_order=reg.word_order,
                                 byte_order=reg.byte_order, encoding=encoding)
    except DecodeError as exc:
        raise _fail(spec, str(exc)) from None
    return finish_register(spec, value, ctx, reference_c)


def finish_register(spec: FieldSpec, value: int | float | str, ctx: StationContext,
                    reference_c: float = 0.0) -> Any:
    """The rest of ``convert_register`` once the registers are decoded: bits, null, kind."""
    reg = spec.register
    assert reg is not None
    if spec.bit_codes and isinstance(value, int):
        for bit, code in spec.bit_codes:  # priority order: the first set bit wins
            if value >> bit & 1:
                return code
        raise _fail(spec, f"no verdict bit set in 0x{value:04X} (bits "
                    + ", ".join(f"{b} = {c}" for b, c in spec.bit_codes) + ")")
    if isinstance(value, int) and reg.mask is not None:
        shift = (reg.mask & -reg.mask).bit_length() - 1
        value = (value & reg.mask) >> shift
    elif isinstance(value, int) and reg.bit is not None:
        value = value >> reg.bit & 1
    if register_null(spec, value):
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


def register_null(spec: FieldSpec, value: int | float | str) -> bool:
    """Whether a decoded register value is the field's "no value" (NaN only where declared)."""
    reg = spec.register
    assert reg is not None
    if isinstance(value, float) and math.isnan(value):
        if reg.null is None or not (isinstance(reg.null, float) and math.isnan(reg.null)):
            raise _fail(spec, "is NaN (declare null = \"nan\" if NaN means no value)")
        return True
    if isinstance(value, str):
        return value == ""
    return reg.null is not None and value == reg.null


def _bcd(word: int) -> int:
    """A packed-BCD register as its decimal value (0x2026 -> 2026); ValueError if not BCD."""
    digits = f"{word:04X}"
    if not digits.isdigit():
        raise ValueError(f"0x{word:04X} is not packed BCD")
    return int(digits)


def _register_time(spec: FieldSpec, words: Sequence[int], ctx: StationContext) -> datetime:
    """A station clock kept as registers: year, month, day, hour, minute, second (one per
    register), or packed BCD (0x2026, 0x1203 month/day, 0x1405 hour/minute, 0x0009 second),
    in the station's local zone."""
    try:
        if spec.time_format == "ymdhms":
            y, mo, d, h, mi, sec = (int(w) for w in words)
        else:
            year, md, hm, ss = (_bcd(w) for w in words)
            y, mo, d, h, mi, sec = year, md // 100, md % 100, hm // 100, hm % 100, ss
        local = datetime(y, mo, d, h, mi, sec)
    except (ValueError, OverflowError) as exc:
        shown = " ".join(f"{w:04X}" for w in words)
        raise _fail(spec, f"registers {shown} are not a date and time ({exc})") from None
    return local.replace(tzinfo=_zone(spec, ctx))


def _derive_calibration(values: dict[str, Any]) -> None:
    """Fill ratio and sensitivity from the losses when the station did not send them.

    The ratio (standard loss / master loss) is undefined when the master loss is not above
    zero: it stays absent. The sensitivity needs a span (standard loss above master loss) and
    the standard's flow. A calibration without a span is marked failed, with the reason, also
    when the station itself reported it passed: it cannot convert a loss into a leak rate.
    """
    master, standard = values["master_loss_pa"], values["standard_loss_pa"]
    flow = values.get("standard_sccm")
    notes = []
    if values.get("ratio") is None and master > 0:
        values["ratio"] = standard / master
    if standard <= master:
        notes.append(f"no span: standard loss {standard:g} Pa is not above the master loss "
                     f"{master:g} Pa")
        if values.get("passed"):
            notes.append("station reported passed; marked failed")
        values["passed"] = False
        values.pop("sensitivity", None)
    elif values.get("sensitivity") is None and flow is not None:
        values["sensitivity"] = Calibration(master, standard, flow).sensitivity
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
) -> Decoded:
    """A TestResult/CalibrationEvent from canonical values, or Rejected if they don't fit."""
    present: dict[str, Any] = {k: v for k, v in values.items() if v is not None}
    return make_record(record, present, ctx, label, raw, received_at, line_no)


def make_record(
    record: str,
    present: dict[str, Any],
    ctx: StationContext,
    label: str,
    raw: str,
    received_at: datetime,
    line_no: int | None,
) -> Decoded:
    """``build_record`` for values without the ``None`` ones (fields left at their default)."""
    common: dict[str, Any] = {
        "station": ctx.station,
        "line": ctx.line,
        "received_at": received_at,
        "raw": clip_raw(raw),
        "profile": label,
    }
    if "program" not in present:
        present["program"] = ctx.default_program
    if "ended_at" not in present:  # a station without a clock: the gateway's receive time
        present["ended_at"] = received_at
        present["time_source"] = "gateway"
    if ctx.program_params:
        supplied: dict[str, str] = dict(present.get("supplied", ()))
        complete(record, present, ctx.program_params, supplied)
        if supplied:
            present["supplied"] = tuple(sorted(supplied.items()))
    try:
        if record == "result":
            verdict = present["verdict"]
            if type(verdict) is not Verdict:
                present["verdict"] = Verdict(verdict)
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
) -> Decoded:
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
