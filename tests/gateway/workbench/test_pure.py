"""The workbench's pure parts: every decoding of a register pair against pymodbus's own codec
and the standard library's struct, change detection on scripted polls, the register-image dump
format, and the readability score of serial captures."""

from __future__ import annotations

import json
import struct
from datetime import UTC, datetime

import pytest
from pymodbus.client import ModbusTcpClient

from gateway.workbench.dump import Dump, Snapshot, dump_from_json, dump_to_json
from gateway.workbench.registers import decode_pair, pair_readings, register_readings
from gateway.workbench.text import readability
from gateway.workbench.watch import watch_report

DT = ModbusTcpClient.DATATYPE


@pytest.mark.parametrize("value", [350.02, -0.0123, 6.0e-5, 123456.0])
def test_float_orders_against_pymodbus(value: float) -> None:
    """ABCD and CDAB against pymodbus's convert_from_registers (word_order big/little);
    BADC and DCBA against struct with the bytes swapped by hand."""
    regs = ModbusTcpClient.convert_to_registers(value, DT.FLOAT32, word_order="big")
    hi, lo = regs
    assert decode_pair(hi, lo, "ABCD")[2] == pytest.approx(
        ModbusTcpClient.convert_from_registers(regs, DT.FLOAT32, word_order="big"), rel=1e-7)
    little = ModbusTcpClient.convert_to_registers(value, DT.FLOAT32, word_order="little")
    assert decode_pair(*little, "CDAB")[2] == pytest.approx(
        ModbusTcpClient.convert_from_registers(little, DT.FLOAT32, word_order="little"),
        rel=1e-7)
    raw = struct.pack(">f", value)  # A B C D
    badc = struct.unpack(">HH", bytes([raw[1], raw[0], raw[3], raw[2]]))
    dcba = struct.unpack(">HH", bytes([raw[3], raw[2], raw[1], raw[0]]))
    assert decode_pair(*badc, "BADC")[2] == pytest.approx(value, rel=1e-7)
    assert decode_pair(*dcba, "DCBA")[2] == pytest.approx(value, rel=1e-7)


def test_int_orders_against_pymodbus() -> None:
    for value in (-123456, 70000, 2**31 - 1):
        regs = ModbusTcpClient.convert_to_registers(value, DT.INT32, word_order="big")
        assert decode_pair(*regs, "ABCD")[0] == value
        little = ModbusTcpClient.convert_to_registers(value, DT.INT32, word_order="little")
        assert decode_pair(*little, "CDAB")[0] == value
    regs = ModbusTcpClient.convert_to_registers(4_000_000_000, DT.UINT32, word_order="big")
    assert decode_pair(*regs, "ABCD")[1] == 4_000_000_000


def test_register_rows_and_hints() -> None:
    rows = {r.address: r for r in register_readings({0: 0x2026, 1: 0xFFFE, 2: 2026,
                                                     3: 0x4F4B})}
    assert rows[0].bcd == 2026 and "BCD year?" in rows[0].hints  # 0x2026 read as BCD digits
    assert rows[1].int16 == -2 and rows[1].hex == "0xFFFE"
    assert "year?" in rows[2].hints
    assert rows[3].chars == "OK" and "text?" in rows[3].hints
    with pytest.raises(ValueError, match="16-bit"):
        register_readings({0: 70000})
    pairs = pair_readings({10: 17327, 11: 655})  # 350.02 as float32 ABCD
    assert next(p.order for p in pairs if "float?" in p.hints) == "ABCD"


def _poll(counter: int, block_base: int, extra: dict[int, int] | None = None
          ) -> dict[tuple[str, int], int]:
    regs = {("holding", a): 0 for a in range(0, 60)}
    regs[("holding", 1)] = counter
    for k in range(6):
        regs[("holding", block_base + k)] = counter * 7 + k + 1
    for a, v in (extra or {}).items():
        regs[("holding", a)] = v
    return regs


def test_watch_finds_a_ring_and_its_counter() -> None:
    # slot of cycle n at 20 + 10·(n mod 3): the block moves along as the counter steps
    polls = [_poll(n, 20 + 10 * (n % 3)) for n in (4, 5, 6, 7)]
    report = watch_report(polls)
    best = report.counters[0]
    assert (best.table, best.address, best.width) == ("holding", 1, 1)
    assert report.ring == (20, 10)


def test_watch_finds_a_last_result_block_and_a_wrapping_counter() -> None:
    polls = [_poll(n % 65536, 30) for n in (65534, 65535, 65536, 65537)]
    report = watch_report(polls)
    assert report.counters[0].address == 1 and report.counters[0].steps == 3  # wrap included
    assert ("holding", 30, 35) in report.blocks
    assert report.ring is None
    assert any("last-result block" in n for n in report.notes)
    assert any("low word of a uint32" in n for n in report.notes)  # register 0 stays 0


def test_watch_without_a_counter_says_so() -> None:
    polls = [{("holding", 0): v} for v in (5, 9, 2)]
    report = watch_report(polls)
    assert not report.counters and "no counter" in report.notes[0]


def test_dump_round_trip_and_its_mistakes() -> None:
    at = datetime(2026, 12, 3, 8, 0, tzinfo=UTC)
    values = {("holding", 50): 7, ("holding", 51): 8, ("input", 0): 65535, ("coils", 3): 1}
    text = dump_to_json(Dump(3, (Snapshot(at, values),), comment="L3-S2"))
    back = dump_from_json(text)
    assert back.device_id == 3 and back.snapshots[0].values == values
    doc = json.loads(text)
    assert doc["snapshots"][0]["holding"] == {"50": [7, 8]}  # consecutive values, one run
    doc["snapshots"][0]["coils"]["3"] = [2]
    bad = json.dumps(doc)
    with pytest.raises(ValueError, match=r"snapshots\[0\]\.coils\.3\[0\]: expected an integer"):
        dump_from_json(bad)
    with pytest.raises(ValueError, match="version"):
        dump_from_json(text.replace('"version": 2', '"version": 9'))
    with pytest.raises(ValueError, match="not JSON"):
        dump_from_json("{")


def test_readability_tells_text_from_noise() -> None:
    line = b"R;1042;2026-12-02 07:15:09;HX-210;;ACC;350.02;41.8;0.213;2.000\r\n" * 3
    assert readability(line).verdict == "readable"
    noise = bytes((i * 73 + 41) % 256 for i in range(300))  # a wrong baud rate looks like this
    assert readability(noise).verdict == "noise"
    assert readability(b"").verdict == "silent"
    framed = b"\x02TICKET 4711\r\nRESULT PASS\r\n\x03"
    assert readability(framed).score > 0.9
