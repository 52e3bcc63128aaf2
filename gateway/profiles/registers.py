"""Pure Modbus register codecs: word order, byte order, scale-free raw values.

A register is a 16-bit word sent high byte first on the wire. Multi-register values put their
words in an order the device chooses ("big": most significant word first, ABCD; "little": least
significant first, CDAB), and some devices also swap the two bytes inside each register
(byte order "little": BADC / DCBA). Strings are two characters per register, high byte first
("big") or low byte first ("little"). We keep our own implementation so decoding stays pure and
version-proof; tests check it against pymodbus's ``convert_from_registers``.
"""

from __future__ import annotations

import math
import re
import struct
from collections.abc import Sequence
from typing import Literal

from gateway.errors import DecodeError

__all__ = [
    "NUMERIC_TYPES",
    "Order",
    "decode_registers",
    "encode_value",
    "parse_type",
    "registers_hex",
    "type_width",
]

Order = Literal["big", "little"]

# type name → (struct code, registers)
NUMERIC_TYPES: dict[str, tuple[str, int]] = {
    "int16": ("h", 1),
    "uint16": ("H", 1),
    "int32": ("i", 2),
    "uint32": ("I", 2),
    "float32": ("f", 2),
}

_STRING = re.compile(r"^string\((\d+)\)$")


def parse_type(name: str) -> tuple[str, int]:
    """``("uint32", 2)`` or ``("string", n)``; DecodeError for an unknown type name."""
    if name in NUMERIC_TYPES:
        return name, NUMERIC_TYPES[name][1]
    match = _STRING.match(name)
    if match and int(match.group(1)) > 0:
        return "string", int(match.group(1))
    raise DecodeError(
        f"unknown register type {name!r}; expected one of "
        f"{', '.join(NUMERIC_TYPES)} or string(n) with n registers"
    )


def type_width(name: str) -> int:
    """Number of registers a value of this type occupies."""
    return parse_type(name)[1]


def _check_registers(regs: Sequence[int]) -> None:
    for i, reg in enumerate(regs):
        if isinstance(reg, bool) or not isinstance(reg, int) or not 0 <= reg <= 0xFFFF:
            raise DecodeError(f"register {i} is {reg!r}, expected an integer 0..65535")


def _to_bytes(regs: Sequence[int], word_order: Order, byte_order: Order) -> bytes:
    """Registers as bytes: words in ``word_order``, each word's two bytes in ``byte_order``
    (one ``struct`` call: this runs for every field of every record read)."""
    words = list(regs) if word_order == "big" else list(reversed(regs))
    return struct.pack(f"{'>' if byte_order == 'big' else '<'}{len(words)}H", *words)


def _from_bytes(data: bytes, word_order: Order, byte_order: Order) -> list[int]:
    words = list(struct.unpack(f"{'>' if byte_order == 'big' else '<'}{len(data) // 2}H",
                               data[: len(data) // 2 * 2]))
    return words if word_order == "big" else list(reversed(words))


def decode_registers(
    regs: Sequence[int],
    type_name: str,
    *,
    word_order: Order = "big",
    byte_order: Order = "big",
    encoding: str = "ascii",
) -> int | float | str:
    """Decode one value; raises DecodeError (with what was wrong) for bad registers or bytes.

    Strings ignore ``word_order`` (registers are read in address order) and have trailing NUL
    and space padding removed; a float32 may come back NaN (the caller decides what NaN means).
    """
    kind, width = parse_type(type_name)
    if len(regs) != width:
        raise DecodeError(f"{type_name} needs {width} registers, got {len(regs)}")
    _check_registers(regs)
    if kind == "string":
        data = _to_bytes(regs, "big", byte_order)
        try:
            text = data.decode(encoding)
        except UnicodeDecodeError as exc:
            raise DecodeError(
                f"string is not valid {encoding}: byte 0x{data[exc.start]:02x} at {exc.start}"
            ) from None
        return text.rstrip("\x00 ")
    code = NUMERIC_TYPES[kind][0]
    value: int | float = struct.unpack(">" + code, _to_bytes(regs, word_order, byte_order))[0]
    return value


def encode_value(
    value: int | float | str,
    type_name: str,
    *,
    word_order: Order = "big",
    byte_order: Order = "big",
    encoding: str = "ascii",
) -> list[int]:
    """Registers for one value (the inverse of decode_registers; used for samples and tests)."""
    kind, width = parse_type(type_name)
    if kind == "string":
        data = str(value).encode(encoding)
        if len(data) > 2 * width:
            raise DecodeError(f"{value!r} does not fit in {width} registers")
        return _from_bytes(data.ljust(2 * width, b"\x00"), "big", byte_order)
    code = NUMERIC_TYPES[kind][0]
    number = float(value) if kind == "float32" else int(value)
    if kind == "float32" and math.isfinite(number) and abs(number) > 3.4028234663852886e38:
        raise DecodeError(f"{value!r} is out of float32 range")
    try:
        data = struct.pack(">" + code, number)
    except struct.error as exc:
        raise DecodeError(f"{value!r} does not fit {type_name}: {exc}") from None
    return _from_bytes(data, word_order, byte_order)


def registers_hex(address: int, regs: Sequence[object]) -> str:
    """Audit text for a register block: ``@100: 0000 0412 ...`` (non-words shown as given)."""
    words = [
        f"{r:04x}" if isinstance(r, int) and not isinstance(r, bool) and 0 <= r <= 0xFFFF
        else repr(r)
        for r in regs
    ]
    return f"@{address}: " + " ".join(words)
