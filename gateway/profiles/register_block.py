"""A result slot or calibration block layout compiled once into a decoder (``decode_block``'s
fast twin).

``normalise.decode_block`` interprets the profile for every block it decodes: it parses each
field's type name, re-checks each field's registers, resolves units and code tables. A station
polled once a second does that for every result. ``BlockDecoder`` does the per-layout work
once per station (``struct`` formats, unit factors, code tables, the guard format) and then
gives, for every input, the same record or the same ``Rejected`` as ``decode_block``; what it
does not specialise (register clocks, bit fields, strings, unusual layouts) it hands to
``convert_register``. A property test holds the two to the same output.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Callable, Sequence
from datetime import datetime
from functools import partial
from typing import Any

from gateway.errors import DecodeError, UnitError
from gateway.profiles.model import (
    BlockSpec,
    Decoded,
    FieldSpec,
    ModbusSpec,
    RingSpec,
    StationContext,
)
from gateway.profiles.normalise import (
    _DEFAULT_UNITS,
    _QUANTITY_KINDS,
    _VERDICTS,
    FieldError,
    _coded,
    _fail,
    _scaled,
    build_record,
    convert_register,
    decode_block,
    finish_register,
    register_null,
    reject,
)
from gateway.profiles.registers import NUMERIC_TYPES, parse_type
from gateway.records import Verdict
from gateway.units import same_value, to_canonical_fn

__all__ = ["BlockDecoder", "counter_reader"]

#: one field's canonical value from the whole block (already checked: words 0..65535)
FieldDecoder = Callable[[Sequence[int]], Any]


def _word_packer(byte_order: str, width: int) -> Callable[..., bytes]:
    return struct.Struct(f"{'>' if byte_order == 'big' else '<'}{width}H").pack


def _number_reader(type_name: str, at: int, width: int, word_order: str,
                   byte_order: str) -> Callable[[Sequence[int]], Any]:
    """``decode_registers(words[at:at + width], type_name, ...)`` for a numeric type, as one
    ``struct`` pack and unpack (the words are known to be 0..65535)."""
    pack = _word_packer(byte_order, width)
    unpack = struct.Struct(">" + NUMERIC_TYPES[type_name][0]).unpack
    end = at + width
    if word_order == "big" or width == 1:
        return lambda words: unpack(pack(*words[at:end]))[0]
    return lambda words: unpack(pack(*reversed(words[at:end])))[0]


def _raw_decoder(spec: FieldSpec, length: int) -> Callable[[Sequence[int]], int | float] | None:
    """The field's number from the block, as ``decode_registers`` gives it; None when the
    field is not a plain number inside the block (then ``convert_register`` does it all)."""
    reg = spec.register
    if reg is None or reg.at < 0 or reg.at + reg.width > length:
        return None
    if spec.kind == "timestamp" and spec.time_format in ("ymdhms", "bcd-ymdhms"):
        return None
    try:
        type_kind, width = parse_type(reg.type)
    except DecodeError:
        return None
    if type_kind not in NUMERIC_TYPES or width != reg.width:
        return None
    return _number_reader(type_kind, reg.at, width, reg.word_order, reg.byte_order)


def _finisher(spec: FieldSpec, ctx: StationContext,
              reference_c: float) -> Callable[[int | float], Any] | None:
    """``finish_register`` for the common plain kinds with codes and units resolved once;
    None where the field needs the general path (bits, masks, other kinds)."""
    reg = spec.register
    assert reg is not None
    if spec.bit_codes or reg.mask is not None or reg.bit is not None:
        return None
    kind = spec.kind
    empty_none = spec.empty_none
    isfinite = math.isfinite
    sentinel = reg.null

    def is_null(value: int | float) -> bool:
        # NaN, or the sentinel: only then the full rule (it may raise for an undeclared NaN)
        return (value != value or value == sentinel) and register_null(spec, value)

    def null(value: int | float) -> Any:
        if empty_none:
            return None
        raise _fail(spec, f"holds the null value {value!r} but the field is required")

    if kind in ("verdict", "bool"):
        codes: dict[str, Any] = dict(spec.codes or {})
        if kind == "verdict":  # the member make_record would make of the code's text
            codes = {k: Verdict(v) if v in _VERDICTS else v for k, v in codes.items()}

        def as_code(value: int | float) -> Any:
            if is_null(value):
                return null(value)
            try:
                return codes[str(value)]
            except KeyError:
                return _coded(spec, str(value))  # raises the unknown-code error

        return as_code
    if kind == "program":
        programs = ctx.programs

        def as_program(value: int | float) -> Any:
            if is_null(value):
                return null(value)
            return programs.get(value, str(value)) if isinstance(value, int) else value

        return as_program
    if kind in _QUANTITY_KINDS and spec.unit_from is None:
        unit = spec.unit or _DEFAULT_UNITS.get(kind)
        if unit is None:
            return None
        try:
            to_unit = to_canonical_fn(unit, kind, reference_c=reference_c)  # type: ignore[arg-type]
        except UnitError:
            return None

        plain = spec.scale == 1.0 and spec.offset == 0.0  # _scaled would return it as is
        if plain and to_unit is same_value:

            def as_canonical(value: int | float) -> Any:
                if (value != value or value == sentinel) and register_null(spec, value):
                    return null(value)
                if not isfinite(value):
                    raise _fail(spec, f"{value!r} is not a finite number")
                return float(value)

            return as_canonical

        def as_quantity(value: int | float) -> Any:
            if (value != value or value == sentinel) and register_null(spec, value):
                return null(value)
            if not isfinite(value):
                raise _fail(spec, f"{value!r} is not a finite number")
            number = float(value)
            out = to_unit(number if plain else _scaled(spec, number))
            if not isfinite(out):
                raise _fail(spec, f"{number!r} is not a finite number")
            return out

        return as_quantity
    return None


def compile_register_field(spec: FieldSpec, ctx: StationContext, reference_c: float,
                           encoding: str, length: int) -> FieldDecoder:
    """One field of a block of ``length`` registers, compiled (see the module docstring)."""
    raw = _raw_decoder(spec, length)
    if raw is None:
        return lambda words: convert_register(spec, words, ctx, reference_c, encoding)
    return _after(spec, ctx, reference_c, raw)


def _after(spec: FieldSpec, ctx: StationContext, reference_c: float,
           raw: Callable[[Any], Any]) -> Callable[[Any], Any]:
    finish = _finisher(spec, ctx, reference_c)
    if finish is None:
        return lambda source: finish_register(spec, raw(source), ctx, reference_c)
    return lambda source: finish(raw(source))


def _finish_general(spec: FieldSpec, ctx: StationContext, reference_c: float,
                    value: int | float) -> Any:
    return finish_register(spec, value, ctx, reference_c)


def _plain_code(type_name: str, at: int, width: int, word_order: str, byte_order: str,
                length: int) -> str | None:
    """The ``struct`` code of a number read straight from the block's big-endian bytes, or
    None when its words or bytes are swapped (or it is not a plain number in the block)."""
    try:
        type_kind, type_width = parse_type(type_name)
    except DecodeError:
        return None
    if (type_kind not in NUMERIC_TYPES or type_width != width or at < 0 or at + width > length
            or byte_order != "big" or (word_order != "big" and width > 1)):
        return None
    return NUMERIC_TYPES[type_kind][0]


def _string_code(type_name: str, at: int, width: int, byte_order: str,
                 length: int) -> str | None:
    """``struct``'s bytes code of a string read straight from the block (strings keep their
    registers in address order whatever the word order), or None."""
    try:
        type_kind, type_width = parse_type(type_name)
    except DecodeError:
        return None
    if (type_kind != "string" or type_width != width or at < 0 or at + width > length
            or byte_order != "big"):
        return None
    return f"{2 * width}s"


def _text_finisher(spec: FieldSpec, ctx: StationContext, reference_c: float,
                   encoding: str) -> Callable[[bytes], Any]:
    """A string field's bytes as ``convert_register`` takes them: decoded, padding removed."""

    def as_text(data: bytes) -> Any:
        try:
            text = data.decode(encoding)
        except UnicodeDecodeError as exc:
            raise _fail(spec, f"string is not valid {encoding}: byte 0x{data[exc.start]:02x} "
                              f"at {exc.start}") from None
        return finish_register(spec, text.rstrip("\x00 "), ctx, reference_c)

    return as_text


class BlockDecoder:
    """``decode_block`` for one block layout and one station, its layout work done once.

    The block's words are packed to bytes once (the audit text is their hex); every plain
    big-endian number in it, guards included, comes out of one compiled ``struct`` unpack;
    the rest is read field by field.
    """

    def __init__(self, spec: ModbusSpec, record: str, block: RingSpec | BlockSpec,
                 ctx: StationContext) -> None:
        self.spec, self.record, self.block, self.ctx = spec, record, block, ctx
        self.label = spec.profile_label
        length = self._length = int(block.length)
        self._pack_all = _word_packer("big", length)
        width = block.counter_registers
        # (at, width, struct code) of everything one unpack can read, and who reads it
        plain: list[tuple[int, int, str, str]] = []
        guard_codes = [_plain_code(block.counter_type, at, width, block.word_order,
                                   block.byte_order, length)
                       for at in (block.head_guard, block.tail_guard)]
        self._fast = all(code is not None for code in guard_codes)
        for at, code in zip((block.head_guard, block.tail_guard), guard_codes, strict=True):
            if code is not None:
                plain.append((at, width, code, f"guard@{at}"))
        steps: dict[str, Any] = {}
        for f in block.fields:
            reg = f.register
            plain_time = f.kind != "timestamp" or f.time_format not in ("ymdhms", "bcd-ymdhms")
            code = (_plain_code(reg.type, reg.at, reg.width, reg.word_order, reg.byte_order,
                                length) or _string_code(reg.type, reg.at, reg.width,
                                                        reg.byte_order, length)
                    if reg is not None and plain_time else None)
            if reg is not None and code is not None:
                plain.append((reg.at, reg.width, code, f.canonical))
            else:
                steps[f.canonical] = compile_register_field(
                    f, ctx, spec.leak_reference_c, spec.string_encoding, length)
        plain.sort()
        layout, end, names = ">", 0, []
        for at, w, code, name in plain:
            if at < end:  # overlapping values (bits of one register): read on their own
                if name.startswith("guard@"):
                    self._fast = False
                else:
                    field = next(f for f in block.fields if f.canonical == name)
                    steps[name] = compile_register_field(
                        field, ctx, spec.leak_reference_c, spec.string_encoding, length)
                continue
            layout += f"{2 * (at - end)}x{code}" if at > end else code
            end = at + w
            names.append(name)
        self._unpack = struct.Struct(layout).unpack_from
        index = {name: i for i, name in enumerate(names)}
        self._head = index.get(f"guard@{block.head_guard}", -1)
        self._tail = index.get(f"guard@{block.tail_guard}", -1)
        # per field, in the profile's order (the first failing field names the rejection):
        # (name, position in the unpacked tuple or -1, value -> canonical or words -> canonical)
        self._steps: list[tuple[str, int, Callable[[Any], Any]]] = []
        for f in block.fields:
            if f.canonical in steps:
                self._steps.append((f.canonical, -1, steps[f.canonical]))
            else:
                reg = f.register
                assert reg is not None
                finish: Callable[[Any], Any] | None
                if _string_code(reg.type, reg.at, reg.width, reg.byte_order, length):
                    finish = _text_finisher(f, ctx, spec.leak_reference_c, spec.string_encoding)
                else:
                    finish = _finisher(f, ctx, spec.leak_reference_c)
                if finish is None:
                    finish = partial(_finish_general, f, ctx, spec.leak_reference_c)
                self._steps.append((f.canonical, index[f.canonical], finish))

    def __call__(self, address: int, regs: Sequence[int], expected: int,
                 received_at: datetime) -> Decoded:
        words = regs if type(regs) is list else None
        if (words is None or len(words) != self._length or not self._fast
                or not _plain_words(words)):
            # anything out of the ordinary: the interpreter says exactly what is wrong
            return decode_block(self.spec, self.record, self.block, address, regs, expected,
                                self.ctx, received_at)
        data = self._pack_all(*words)
        numbers = self._unpack(data)
        if numbers[self._head] != expected or numbers[self._tail] != expected:
            return decode_block(self.spec, self.record, self.block, address, regs, expected,
                                self.ctx, received_at)
        raw = f"@{address}: " + data.hex(" ", 2)
        values: dict[str, Any] = {}
        try:
            for name, i, convert in self._steps:
                values[name] = convert(numbers[i]) if i >= 0 else convert(words)
        except FieldError as exc:
            return reject(self.ctx, self.label, raw, str(exc), received_at)
        if self.record == "result":
            values["cycle"] = expected
        return build_record(self.record, values, self.ctx, self.label, raw, received_at, None)


def _plain_words(words: list[int]) -> bool:
    """Every entry a real int (not a bool) from 0 to 65535."""
    return (set(map(type, words)) <= {int} and (not words or (
        min(words) >= 0 and max(words) <= 0xFFFF)))


def counter_reader(type_name: str, word_order: str,
                   byte_order: str) -> Callable[[Sequence[int]], int | None]:
    """A counter's value from exactly its registers, or None when they are not plain words of
    the right number (or the type is not a plain integer): then ``decode_registers`` says why."""
    try:
        type_kind, width = parse_type(type_name)
    except DecodeError:
        return lambda regs: None
    if type_kind not in NUMERIC_TYPES or type_kind == "float32":
        return lambda regs: None
    read = _number_reader(type_kind, 0, width, word_order, byte_order)

    def counter(regs: Sequence[int]) -> int | None:
        if type(regs) is not list or len(regs) != width or not _plain_words(regs):
            return None
        return int(read(regs))

    return counter
