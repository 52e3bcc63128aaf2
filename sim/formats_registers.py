"""Register layouts of the Modbus types lf-mbinput, lf-mblast and lf-mbnoclk (pure).

Each encoder gives the registers of one result (from its block's first address), what a reader
can know from them (``reported``, canonical units, None where the station leaves a value out)
and each value's resolution. Word and byte orders are applied by ``struct`` on the whole value
and then split into 16-bit words, so the layouts below are those of sim/README.md.
"""

from __future__ import annotations

import math
import struct
from datetime import datetime
from typing import Any, Literal
from zoneinfo import ZoneInfo

from gateway.records import Verdict
from gateway.units import from_canonical, to_canonical
from sim.formats import Encoded, _f32, _iso, encode_string
from sim.station import SimResult

__all__ = [
    "MBINPUT_SLOT",
    "mbinput_result",
    "mblast_result",
    "mbnoclk_bits",
    "mbnoclk_result",
    "ordered",
]

Order = Literal["big", "little"]


def ordered(data: bytes, word_order: Order, byte_order: Order) -> list[int]:
    """A big-endian value's bytes as registers in the given word and byte order (ABCD, CDAB,
    BADC, DCBA for 32 bits)."""
    words = [data[i:i + 2] for i in range(0, len(data), 2)]
    if word_order == "little":
        words.reverse()
    if byte_order == "little":
        words = [w[::-1] for w in words]
    return [int.from_bytes(w, "big") for w in words]


def _local(t: datetime, tz: ZoneInfo) -> datetime:
    return t.replace(microsecond=0).astimezone(tz)


def _reason_code(r: SimResult) -> str:
    if r.verdict is Verdict.PASS:
        return ""
    if r.verdict is Verdict.GROSS:
        return "FILL"
    if r.verdict is Verdict.ABORTED:
        return "STOP"
    return "LOW" if "lower" in r.reason else "HIGH"


# ---- lf-mbinput: input-register ring, 16-bit counter, local-time registers, status bits ----
MBINPUT_BASE = 10
MBINPUT_STRIDE = 24
MBINPUT_DEPTH = 4
MBINPUT_SLOT = 24
MBINPUT_ACK = 100  # holding register the gateway writes the handled cycle to
_STATUS_BIT = {Verdict.PASS: 1, Verdict.REJECT: 2, Verdict.GROSS: 3, Verdict.ABORTED: 4}
_VALID, _HEATER, _DOOR = 0, 12, 13


def mbinput_slot_address(cycle: int) -> int:
    return MBINPUT_BASE + MBINPUT_STRIDE * (cycle % MBINPUT_DEPTH)


def mbinput_result(r: SimResult, tz: ZoneInfo, heater: bool, door: bool) -> Encoded:
    """A 24-register slot: cycle (u16 guard), Y M D h m s local, part (8 chars), program,
    pressure mbar float32 CDAB, loss int32 ×0.01 Pa (−2³¹ when not measured), leak float32
    sccm (NaN when not measured), status bits, reason (8 chars), cycle again (tail guard)."""
    cycle = r.cycle & 0xFFFF
    local = _local(r.station_time, tz)
    measured = r.verdict in (Verdict.PASS, Verdict.REJECT)
    mbar = from_canonical(r.test_pressure_pa, "mbar", "pressure")
    loss = round(r.pressure_loss_pa * 100) if measured else -(2**31)
    leak = r.leak_rate_sccm if measured else math.nan
    status = (1 << _VALID) | (1 << _STATUS_BIT[r.verdict])
    status |= (1 << _HEATER if heater else 0) | (1 << _DOOR if door else 0)
    reason = _reason_code(r)
    regs = [
        cycle,
        local.year, local.month, local.day, local.hour, local.minute, local.second,
        *encode_string(r.part_id or "", 4, "high"),
        r.program_no,
        *ordered(struct.pack(">f", mbar), "little", "big"),
        *ordered(struct.pack(">i", loss), "big", "big"),
        *ordered(struct.pack(">f", leak), "big", "big"),
        status,
        *encode_string(reason, 4, "high"),
        cycle,
    ]
    assert len(regs) == MBINPUT_SLOT
    reported: dict[str, Any] = {
        "cycle": cycle,
        "ended_at": _iso(local),
        "program": r.program,
        "part_id": r.part_id or None,
        "verdict": r.verdict.value,
        "test_pressure_pa": to_canonical(_f32(mbar), "mbar", "pressure"),
        "pressure_loss_pa": loss / 100 if measured else None,
        "leak_rate_sccm": _f32(leak) if measured else None,
    }
    resolution = {"ended_at": 1.0, "test_pressure_pa": 0.0, "pressure_loss_pa": 0.01,
                  "leak_rate_sccm": 0.0}
    return Encoded(regs, reported, resolution)


# ---- lf-mblast: one last-result block, new-result coil, packed-BCD time, BADC floats -------
MBLAST_LENGTH = 16
_MBLAST_VERDICT = {Verdict.PASS: 1, Verdict.REJECT: 2, Verdict.GROSS: 3, Verdict.ABORTED: 4}


def _bcd(value: int) -> int:
    return int(str(value), 16)


def mblast_result(r: SimResult, tz: ZoneInfo, flags: int) -> Encoded:
    """16 holding registers: cycle u32 ABCD, BCD time (YYYY, MMDD, hhmm, 00ss) local, verdict
    code in bits 0..2 (``flags`` in bits 8..15), program, leak and loss float32 BADC (NaN when
    not measured), reject limit u16 ×0.01 sccm, fill/stabilise/test u16 ×0.1 s."""
    local = _local(r.station_time, tz)
    measured = r.verdict in (Verdict.PASS, Verdict.REJECT)
    leak = r.leak_rate_sccm if measured else math.nan
    loss = r.pressure_loss_pa if measured else math.nan
    limit = round(r.reject_limit_sccm * 100)
    times = [round(r.fill_s * 10), round(r.stabilise_s * 10), round(r.test_s * 10)]
    regs = [
        *ordered(struct.pack(">I", r.cycle), "big", "big"),
        _bcd(local.year), _bcd(local.month * 100 + local.day),
        _bcd(local.hour * 100 + local.minute), _bcd(local.second),
        _MBLAST_VERDICT[r.verdict] | (flags & 0xFF) << 8,
        r.program_no,
        *ordered(struct.pack(">f", leak), "big", "little"),
        *ordered(struct.pack(">f", loss), "big", "little"),
        limit,
        *times,
    ]
    assert len(regs) == MBLAST_LENGTH
    reported: dict[str, Any] = {
        "cycle": r.cycle,
        "ended_at": _iso(local),
        "program": r.program,
        "verdict": r.verdict.value,
        "leak_rate_sccm": _f32(leak) if measured else None,
        "pressure_loss_pa": _f32(loss) if measured else None,
        "reject_limit_sccm": limit / 100,
        "fill_s": times[0] / 10,
        "stabilise_s": times[1] / 10,
        "test_s": times[2] / 10,
    }
    resolution = {"ended_at": 1.0, "leak_rate_sccm": 0.0, "pressure_loss_pa": 0.0,
                  "reject_limit_sccm": 0.01, "fill_s": 0.1, "stabilise_s": 0.1, "test_s": 0.1}
    return Encoded(regs, reported, resolution)


# ---- lf-mbnoclk: change-detected block, no clock, DCBA, verdict from discrete inputs -------
MBNOCLK_LENGTH = 7


def mbnoclk_result(r: SimResult) -> Encoded:
    """7 holding registers, DCBA: cycle u32, program u16, leak int32 ×0.001 sccm, loss int32
    ×0.1 Pa. A gross or aborted test leaves the last readings' registers at 0 (the station
    has no "not measured" code: the profile reads 0)."""
    measured = r.verdict in (Verdict.PASS, Verdict.REJECT)
    leak = round(r.leak_rate_sccm * 1000) if measured else 0
    loss = round(r.pressure_loss_pa * 10) if measured else 0
    regs = [
        *ordered(struct.pack(">I", r.cycle), "little", "little"),
        r.program_no,
        *ordered(struct.pack(">i", leak), "little", "little"),
        *ordered(struct.pack(">i", loss), "little", "little"),
    ]
    assert len(regs) == MBNOCLK_LENGTH
    reported: dict[str, Any] = {
        "cycle": r.cycle,
        "program": r.program,
        "verdict": r.verdict.value,
        "leak_rate_sccm": leak / 1000,
        "pressure_loss_pa": loss / 10,
    }
    resolution = {"leak_rate_sccm": 0.001, "pressure_loss_pa": 0.1}
    return Encoded(regs, reported, resolution)


def mbnoclk_bits(r: SimResult) -> list[bool]:
    """Discrete inputs 0..2: pass (1) or fail (0), gross, abort."""
    return [r.verdict is Verdict.PASS, r.verdict is Verdict.GROSS,
            r.verdict is Verdict.ABORTED]
