"""Block check characters serial stations append to a line or frame (pure).

Stations protect their output the way serial protocols always have: an XOR of the bytes (BCC),
the Modbus ASCII LRC (two's complement of the byte sum), or a CRC-16 in one of its common
variants. Each function takes the covered bytes and returns the check value as an integer;
``CHECKS`` names them for profiles.
"""

from __future__ import annotations

import binascii
from collections.abc import Callable
from functools import reduce

__all__ = ["CHECKS", "crc16_modbus", "lrc8", "xor8"]


def xor8(data: bytes) -> int:
    """XOR of every byte (the BCC of many ASCII protocols)."""
    return reduce(lambda a, b: a ^ b, data, 0)


def lrc8(data: bytes) -> int:
    """Longitudinal redundancy check as Modbus ASCII defines it: −(sum of bytes) mod 256."""
    return (-sum(data)) & 0xFF


def _modbus_table() -> list[int]:
    table = []
    for byte in range(256):
        crc = byte
        for _ in range(8):
            crc = (crc >> 1) ^ 0xA001 if crc & 1 else crc >> 1
        table.append(crc)
    return table


_MODBUS = _modbus_table()


def crc16_modbus(data: bytes) -> int:
    """CRC-16/MODBUS: reflected polynomial 0x8005 (0xA001), init 0xFFFF, no final XOR."""
    crc = 0xFFFF
    for byte in data:
        crc = (crc >> 8) ^ _MODBUS[(crc ^ byte) & 0xFF]
    return crc


CHECKS: dict[str, tuple[Callable[[bytes], int], int]] = {
    # name: (function, hex digits)
    "xor8": (xor8, 2),
    "lrc8": (lrc8, 2),
    "crc16-modbus": (crc16_modbus, 4),
    # polynomial 0x1021 unreflected: the standard library's CRC-CCITT, with the two usual inits
    "crc16-ccitt-false": (lambda d: binascii.crc_hqx(d, 0xFFFF), 4),
    "crc16-xmodem": (lambda d: binascii.crc_hqx(d, 0x0000), 4),
}
