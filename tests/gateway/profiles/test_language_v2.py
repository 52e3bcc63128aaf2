"""Profile language for the serial stations plants have: decimal commas and thousands points,
a sign after the number, placeholders for "no value", a date column plus a time column,
untagged lines told apart by field count or a field's pattern, constants a profile states,
and a check value at the end of each line."""

from __future__ import annotations

import binascii
import tomllib
from datetime import UTC, datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import pint
import pytest
from pymodbus.framer import FramerAscii, FramerRTU

from gateway.errors import ConfigError
from gateway.profiles import StationContext, load_profile, parse_profile
from gateway.profiles.check import check_sample, check_text
from gateway.profiles.checks import CHECKS, crc16_modbus, lrc8, xor8
from gateway.profiles.decoders import ModbusDecoder
from gateway.profiles.model import NumberText
from gateway.records import Rejected, TestResult

SAMPLES = Path(__file__).resolve().parents[3] / "gateway" / "profiles" / "samples"
NOW = datetime(2026, 12, 3, 14, 0, tzinfo=UTC)
UREG = pint.UnitRegistry()


def _records(profile: str, sample: str, **ctx: object) -> list[object]:
    context = StationContext(station="S1", line="L1", **ctx)  # type: ignore[arg-type]
    data = (SAMPLES / sample).read_bytes()
    return [e.item for e in check_sample(load_profile(profile), data, context, NOW)
            if e.item is not None]


# -- check values --------------------------------------------------------------------------
def test_crc16_variants_match_the_catalogue_check_values() -> None:
    """CRC RevEng catalogue check values for the ASCII bytes "123456789" (from memory):
    CRC-16/MODBUS 0x4B37, CRC-16/IBM-3740 (a.k.a. CCITT-FALSE) 0x29B1, CRC-16/XMODEM 0x31C3."""
    data = b"123456789"
    assert crc16_modbus(data) == 0x4B37
    assert CHECKS["crc16-ccitt-false"][0](data) == 0x29B1
    assert CHECKS["crc16-xmodem"][0](data) == 0x31C3


def test_crc16_modbus_and_lrc_agree_with_pymodbus() -> None:
    """pymodbus's RTU framer returns the CRC in wire order (low byte first); its ASCII framer
    computes the Modbus LRC."""
    for frame in (b"\x01\x03\x00\x00\x00\x0a", b"\x11\x06\x00\x01\x00\x03", bytes(range(40))):
        crc = crc16_modbus(frame)
        assert FramerRTU.compute_CRC(frame) == ((crc & 0xFF) << 8) | (crc >> 8)
        assert lrc8(frame) == FramerAscii.compute_LRC(frame)


def test_xor_bcc() -> None:
    # common practice: the BCC of an ASCII frame is the XOR of its bytes
    assert xor8(b"\x30\x31") == 0x01
    assert xor8(b"") == 0


# -- number writing ------------------------------------------------------------------------
@pytest.mark.parametrize(("fmt", "text", "plain"), [
    (NumberText(decimal=","), "12,48", "12.48"),
    (NumberText(decimal=",", thousands="."), "2.000,5", "2000.5"),
    (NumberText(decimal=",", thousands="."), "8,5E-01", "8.5E-01"),
    (NumberText(thousands=","), "2,000.5", "2000.5"),
    (NumberText(trailing_sign=True), "0.3-", "-0.3"),
    (NumberText(trailing_sign=True), "1.5e-3", "1.5e-3"),
    (NumberText(absent=("---",)), "---", ""),
])  # fmt: skip
def test_numbers_made_plain(fmt: NumberText, text: str, plain: str) -> None:
    assert fmt.plain(text) == plain


# -- the shipped sample stations -------------------------------------------------------------
def test_semicolon_station_with_decimal_comma_and_split_date() -> None:
    items = _records("lf-semi", "lf-semi.txt", timezone="Europe/Berlin",
                     programs={2: "HX-210"})
    header, ok, nok, gross, aborted, cal, negative = items
    assert isinstance(header, Rejected) and "timestamp" in header.reason
    assert isinstance(ok, TestResult)
    # 03.12.26 14:05:09 Berlin wall time (CET, UTC+1 in December, IANA tz database)
    local = datetime(2026, 12, 3, 14, 5, 9, tzinfo=ZoneInfo("Europe/Berlin"))
    assert ok.ended_at == local.astimezone(UTC)
    assert ok.cycle == 12345 and ok.program == "HX-210" and ok.part_id == "A7-44512"
    # 2.000,5 mbar = 2000.5 mbar (pint)
    assert ok.test_pressure_pa == pytest.approx(UREG.Quantity(2000.5, "mbar").to("Pa").magnitude)
    assert ok.leak_rate_sccm == pytest.approx(0.85) and ok.pressure_loss_pa == pytest.approx(12.48)
    assert ok.reject_limit_sccm is None and ok.test_s is None  # not sent: absent, not zero
    assert nok.verdict == "reject"  # type: ignore[attr-defined]
    assert gross.verdict == "gross" and gross.leak_rate_sccm is None  # type: ignore[attr-defined]
    assert gross.pressure_loss_pa is None  # type: ignore[attr-defined]
    assert aborted.verdict == "aborted" and aborted.test_pressure_pa is None  # type: ignore[attr-defined]
    assert cal.master_loss_pa == pytest.approx(3.1)  # type: ignore[attr-defined]
    assert cal.standard_sccm == pytest.approx(5.0) and cal.passed is True  # type: ignore[attr-defined]
    assert negative.leak_rate_sccm == pytest.approx(-0.024)  # type: ignore[attr-defined]


def test_untagged_station_without_clock_and_with_crc() -> None:
    items = _records("lf-noclock", "lf-noclock.txt")
    first, second, gross, damaged, fail, cal, aborted = items
    assert isinstance(first, TestResult) and first.time_source == "gateway"
    assert first.ended_at == NOW  # the gateway's receive time
    assert second.pressure_loss_pa == pytest.approx(-0.3)  # type: ignore[attr-defined]
    assert gross.verdict == "gross" and gross.leak_rate_sccm is None  # type: ignore[attr-defined]
    assert isinstance(damaged, Rejected) and "checksum" in damaged.reason
    assert fail.verdict == "reject"  # type: ignore[attr-defined]
    assert cal.standard_loss_pa == pytest.approx(205.1)  # type: ignore[attr-defined]
    assert aborted.verdict == "aborted"  # type: ignore[attr-defined]
    # the sample's check values are what the standard library's CRC-CCITT gives
    line = (SAMPLES / "lf-noclock.txt").read_text().splitlines()[0]
    payload, _, value = line.rpartition(" *")
    assert int(value, 16) == binascii.crc_hqx(payload.encode(), 0xFFFF)


# -- loader ----------------------------------------------------------------------------------
_BASE = """
[profile]
name = "t"
version = "1"
transport = "serial"
[serial]
mode = "stream"
[dialect]
kind = "delimited"
"""


def _profile(extra: str) -> object:
    return parse_profile(tomllib.loads(_BASE + extra), "t.toml")


def test_a_profile_constant_is_recorded_as_supplied_by_the_profile() -> None:
    profile = _profile("""
[result]
columns = ["c", "v", "l"]
[result.fields]
cycle = "c"
verdict = { from = "v", codes = { P = "pass" } }
leak_rate_sccm = { from = "l", unit = "sccm" }
reject_limit_sccm = { value = "2 sccm" }
test_s = { value = 8 }
""")
    [entry] = check_text(profile, b"7;P;0.5\n", StationContext("S1", "L1"), NOW)  # type: ignore[arg-type]
    r = entry.item
    assert isinstance(r, TestResult)
    assert r.reject_limit_sccm == 2.0 and r.test_s == 8.0
    assert r.origin("reject_limit_sccm") == "profile" and r.origin("leak_rate_sccm") == "station"


@pytest.mark.parametrize(("extra", "message"), [
    ("""[result]
when = { fields = 2 }
columns = ["c", "v", "x"]
[result.fields]
cycle = "c"
verdict = { from = "v", codes = { P = "pass" } }
""", "the number of columns"),
    ("""[result]
columns = ["c", "v", "a", "b"]
[result.fields]
cycle = "c"
verdict = { from = "v", codes = { P = "pass" } }
leak_rate_sccm = { from = ["a", "b"], unit = "sccm" }
""", "several only for a time or text"),
    ("""[result]
columns = ["c", "v"]
[result.fields]
cycle = "c"
verdict = { from = "v", codes = { P = "pass" } }
reject_limit_sccm = { value = "2 furlongs" }
""", "reject_limit_sccm.value"),
    ("""[result]
columns = ["c", "v"]
[result.fields]
cycle = { value = 3 }
verdict = { from = "v", codes = { P = "pass" } }
""", "cycle.value"),
])  # fmt: skip
def test_loader_errors_name_the_key(extra: str, message: str) -> None:
    with pytest.raises(ConfigError, match=message):
        _profile(extra)


# -- Modbus: bits, masks, clocks kept in registers, a wrapping counter -------------------------
def _mbinput_results() -> list[object]:
    return _records("lf-mbinput", "lf-mbinput.json", programs={2: "HX-210"})


def test_input_register_station_across_its_counter_wrap() -> None:
    """The sample's registers were written with pymodbus's convert_to_registers (float32 low
    word first, int32 and strings big-endian); the clock registers are Berlin wall time."""
    items = _mbinput_results()
    assert [i.cycle for i in items if isinstance(i, TestResult)] == [65533, 65534, 65535, 0, 1]
    first, reject, gross, aborted, negative = items
    berlin = ZoneInfo("Europe/Berlin")
    assert first.ended_at == datetime(2026, 12, 3, 14, 5, 9, tzinfo=berlin)  # type: ignore[attr-defined]
    assert first.test_pressure_pa == pytest.approx(  # type: ignore[attr-defined]
        UREG.Quantity(2000.5, "mbar").to("Pa").magnitude, rel=1e-6)  # float32 of 2000.5
    assert first.pressure_loss_pa == pytest.approx(12.48)  # type: ignore[attr-defined]
    # status words 0x1003 (valid, pass, heater), 0x3005 (+ door, reject), 0x1009 (gross),
    # 0x0017 (valid, pass, reject, abort: abort is listed first and wins)
    assert [i.verdict for i in items] == ["pass", "reject", "gross", "aborted", "pass"]  # type: ignore[attr-defined]
    assert gross.leak_rate_sccm is None and gross.pressure_loss_pa is None  # type: ignore[attr-defined]
    assert reject.reason == "LEAK"  # type: ignore[attr-defined]
    assert aborted.cycle == 0 and negative.leak_rate_sccm == pytest.approx(-0.024)  # type: ignore[attr-defined]


def _variant(old: str, new: str) -> object:
    text = (Path(__file__).resolve().parents[3] / "gateway" / "profiles" / "builtin"
            / "lf-mbinput.toml").read_text()
    assert old in text
    return parse_profile(tomllib.loads(text.replace(old, new)), "variant.toml")


def test_packed_bcd_clock_and_masked_fields() -> None:
    profile = _variant(
        'ended_at = { at = 1, type = "uint16", format = "ymdhms", timezone = "Europe/Berlin" }\n'
        'part_id = { at = 7, type = "string(4)", empty = "none" }\n'
        'program = { at = 11, type = "uint16" }',
        'ended_at = { at = 1, type = "uint16", format = "bcd-ymdhms", timezone = "UTC" }\n'
        'program = { at = 11, type = "uint16", mask = 0xFF00 }')
    regs = [7, 0x2026, 0x1203, 0x1405, 0x0009, 0, 0, 0, 0, 0, 0, 0x0203, *([0] * 11), 7]
    regs[12:14] = [0, 0]
    regs[14:16] = [0, 100]
    regs[16:18] = [0x3F80, 0]  # float32 1.0, big-endian words (IEEE 754)
    regs[18] = 0b10  # pass
    spec = profile.modbus  # type: ignore[attr-defined]
    record = ModbusDecoder(spec).decode_result(
        regs, 7, StationContext("S1", "L1", programs={2: "HX-210"}), NOW)
    assert isinstance(record, TestResult), record
    # 0x2026 0x1203 0x1405 0x0009: packed BCD for 2026-12-03 14:05:09
    assert record.ended_at == datetime(2026, 12, 3, 14, 5, 9, tzinfo=UTC)
    assert record.program == "HX-210"  # the high byte of 0x0203
    assert record.leak_rate_sccm == 1.0 and record.pressure_loss_pa == 1.0
    regs[2] = 0x12A3  # not BCD
    bad = ModbusDecoder(spec).decode_result(regs, 7, StationContext("S1", "L1"), NOW)
    assert isinstance(bad, Rejected) and "not a date and time" in bad.reason


def test_no_verdict_bit_set_is_rejected_with_the_word() -> None:
    items = _records("lf-mbinput", "lf-mbinput.json", programs={2: "HX-210"})
    assert all(isinstance(i, TestResult) for i in items)
    profile = load_profile("lf-mbinput")
    spec = profile.modbus
    assert spec is not None
    regs = [5, 2026, 12, 3, 14, 5, 9, *([0] * 16), 5]
    regs[18] = 0x3001  # valid, heater, door: no verdict bit
    out = ModbusDecoder(spec).decode_result(regs, 5, StationContext("S1", "L1"), NOW)
    assert isinstance(out, Rejected) and "no verdict bit set in 0x3001" in out.reason


def test_times_utc_cannot_hold_are_rejected_with_a_reason() -> None:
    """Year 1 in a zone east of Greenwich (or 9999 west of it) has no UTC equivalent: the
    line is quarantined with that reason, never an OverflowError."""
    profile = load_profile("lf-delim")
    data = (b"R;1042;0001-01-01 00:30:00;HX-210;X;ACC;350.02;41.8;0.213;2.000;-1.000;3.0;8.0;"
            b"10.0;22.41\n")
    [entry] = check_text(profile, data, StationContext("S1", "L1", "Europe/Berlin"), NOW)
    assert isinstance(entry.item, Rejected) and "outside what UTC can hold" in entry.item.reason
