"""Every reading of a register block an integrator may need, with what looks plausible.

A register is shown as int16, uint16, hex, bits and two characters; each pair starting at an
address is shown as int32, uint32 and float32 in the four orders a station may use:

- ``ABCD`` high word first, high byte first (Modbus's own big-endian),
- ``CDAB`` low word first ("word swap"),
- ``BADC`` bytes swapped inside each register,
- ``DCBA`` both.

"Plausible" marks are hints, never decisions: a float32 that is finite, not denormal and of a
magnitude a measurement has; text of printable characters; a BCD word; a year.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

__all__ = [
    "ORDERS",
    "PairReading",
    "RegisterReading",
    "decode_pair",
    "pair_readings",
    "register_readings",
]

#: order name → (low word first, bytes swapped inside each register)
ORDERS: dict[str, tuple[bool, bool]] = {
    "ABCD": (False, False),
    "CDAB": (True, False),
    "BADC": (False, True),
    "DCBA": (True, True),
}


def _swap(word: int) -> int:
    return ((word & 0xFF) << 8) | (word >> 8)


def decode_pair(hi: int, lo: int, order: str) -> tuple[int, int, float]:
    """(int32, uint32, float32) of two registers as read (``hi`` at the lower address)."""
    low_first, swapped = ORDERS[order]
    a, b = (lo, hi) if low_first else (hi, lo)
    if swapped:
        a, b = _swap(a), _swap(b)
    raw = struct.pack(">HH", a, b)
    return struct.unpack(">i", raw)[0], struct.unpack(">I", raw)[0], struct.unpack(">f", raw)[0]


def _plausible_float(x: float) -> bool:
    """Finite, of a magnitude a pressure, leak rate, time or temperature has."""
    return math.isfinite(x) and 1e-5 <= abs(x) <= 1e7


def _is_bcd(word: int) -> bool:
    return all(((word >> s) & 0xF) <= 9 for s in (0, 4, 8, 12))


def _bcd(word: int) -> int:
    return sum(((word >> (4 * i)) & 0xF) * 10**i for i in range(4))


def _chars(word: int) -> str:
    out = ""
    for byte in (word >> 8, word & 0xFF):
        out += chr(byte) if 32 <= byte < 127 else "."
    return out


@dataclass(frozen=True, slots=True)
class RegisterReading:
    address: int
    value: int
    int16: int
    hex: str
    bits: str  # bit 15 … bit 0
    chars: str
    bcd: int | None  # the value read as four BCD digits, when every nibble is 0..9
    hints: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class PairReading:
    address: int
    order: str
    int32: int
    uint32: int
    float32: float
    hints: tuple[str, ...]


def register_readings(block: Mapping[int, int]) -> list[RegisterReading]:
    """One row per register address in ``block`` (address → value 0..65535)."""
    out = []
    for address in sorted(block):
        value = block[address]
        if not 0 <= value <= 0xFFFF:
            raise ValueError(f"register {address} holds {value}, not a 16-bit word")
        signed = value - 0x10000 if value & 0x8000 else value
        hints = []
        if 1990 <= value <= 2099:
            hints.append("year?")
        bcd = _bcd(value) if _is_bcd(value) and value > 9 else None
        if bcd is not None and (0x1990 <= value <= 0x2099):
            hints.append("BCD year?")
        chars = _chars(value)
        if "." not in chars and any(c.isalnum() for c in chars):
            hints.append("text?")
        out.append(RegisterReading(address, value, signed, f"0x{value:04X}",
                                   f"{value:016b}", chars, bcd, tuple(hints)))
    return out


def pair_readings(block: Mapping[int, int], orders: Sequence[str] = tuple(ORDERS),
                  *, now_s: float | None = None) -> list[PairReading]:
    """Every pair (a, a+1) present in ``block``, in each order, with hints: a float of a
    measurement's magnitude, and (given ``now_s``) a UNIX time within 3 years of now."""
    out = []
    for address in sorted(block):
        if address + 1 not in block:
            continue
        hi, lo = block[address], block[address + 1]
        for order in orders:
            i32, u32, f32 = decode_pair(hi, lo, order)
            hints = []
            if _plausible_float(f32) and (hi or lo) and not (abs(f32) < 1e-6):
                hints.append("float?")
            if (now_s is not None and order in ("ABCD", "CDAB")
                    and abs(u32 - now_s) < 3 * 365.25 * 86400):
                hints.append("unix time?")
            out.append(PairReading(address, order, i32, u32, f32, tuple(hints)))
    return out
