"""Modbus result slots and calibration blocks of the built-in register profiles."""

from __future__ import annotations

import math
from datetime import UTC, datetime

import pint
import pytest

from gateway.profiles import StationContext, load_profile
from gateway.profiles.decoders import ModbusDecoder
from gateway.profiles.registers import encode_value
from gateway.records import CalibrationEvent, Rejected, StationState, TestResult, Verdict
from tests.gateway.profiles.blocks import encode_block
from tests.gateway.profiles.conftest import RECEIVED

UREG = pint.UnitRegistry()
T0 = int(datetime(2026, 12, 2, 6, 15, 9, tzinfo=UTC).timestamp())
TCP = dict(ended_at=T0, program=1, verdict=2, test_pressure_pa=350.0, pressure_loss_pa=512.5,
           leak_rate_sccm=7.25, reject_limit_sccm=2.0, lower_limit_sccm=math.nan, fill_s=30,
           stabilise_s=80, test_s=100, temperature_c=-125, part_id="HX210-004711")
RTU = dict(ended_at=T0, program=1, verdict=0x04, test_pressure_pa=1379, pressure_loss_pa=7170,
           leak_rate_sccm=68, reject_limit_sccm=470, lower_limit_sccm=-2147483648, fill_s=25,
           stabilise_s=60, test_s=80, temperature_c=217, part_id="MV44-012")


def test_tcp_slot(ctx: StationContext) -> None:
    m = load_profile("lf-mbtcp").modbus
    assert m is not None
    assert m.result.slot_address(1042) == 100 + 32 * (1042 % 8)
    regs = encode_block(m.result, 1042, TCP)
    r = ModbusDecoder(m).decode_result(regs, 1042, ctx, RECEIVED)
    assert isinstance(r, TestResult)
    assert r.cycle == 1042 and r.ended_at == datetime(2026, 12, 2, 6, 15, 9, tzinfo=UTC)
    assert r.program == "HX-210" and r.verdict == Verdict.REJECT
    assert r.test_pressure_pa == pytest.approx(350_000)
    assert r.leak_rate_sccm == 7.25  # exactly representable in float32
    assert r.lower_limit_sccm is None  # NaN = none
    assert r.temperature_c == -1.25 and r.fill_s == 3.0
    assert r.part_id == "HX210-004711"
    assert r.raw.startswith("@164: 0000 0412 ")
    assert r.profile == "lf-mbtcp@1.0"


def test_tcp_unknown_program_number_is_kept_as_number(ctx: StationContext) -> None:
    m = load_profile("lf-mbtcp").modbus
    assert m is not None
    r = ModbusDecoder(m).decode_result(encode_block(m.result, 9, {**TCP, "program": 17}), 9, ctx,
                                       RECEIVED)
    assert isinstance(r, TestResult) and r.program == "17"


def test_rtu_slot_scaled_integers(ctx: StationContext) -> None:
    m = load_profile("lf-mbrtu").modbus
    assert m is not None
    regs = encode_block(m.result, 12, RTU)
    assert regs[0:2] == [12, 0]  # CDAB: low word first
    r = ModbusDecoder(m).decode_result(regs, 12, ctx, RECEIVED)
    assert isinstance(r, TestResult)
    assert r.verdict == Verdict.GROSS
    assert r.test_pressure_pa == pytest.approx(137_900)
    assert r.pressure_loss_pa == pytest.approx(71.70)
    # 0.00068 mbar·L/s in sccm, checked with pint (mbar·L/s at 0 °C → standard cm³/min).
    expected = (UREG.Quantity(0.00068, "mbar*L/s") / UREG.Quantity(101.325, "kPa")).to(
        "cm**3/min").magnitude
    assert r.leak_rate_sccm == pytest.approx(expected)
    assert r.lower_limit_sccm is None  # INT32_MIN = none
    assert r.temperature_c == 21.7 and r.part_id == "MV44-012"


def test_torn_and_short_blocks(ctx: StationContext) -> None:
    m = load_profile("lf-mbtcp").modbus
    assert m is not None
    regs = encode_block(m.result, 1042, TCP)
    torn = regs[:28] + encode_value(1034, "uint32")
    rej = ModbusDecoder(m).decode_result(torn, 1042, ctx, RECEIVED)
    assert isinstance(rej, Rejected)
    assert rej.reason == "torn block: head guard 1042, tail guard 1034, expected cycle 1042"
    rej = ModbusDecoder(m).decode_result(regs, 1050, ctx, RECEIVED)
    assert isinstance(rej, Rejected) and "expected cycle 1050" in rej.reason
    rej = ModbusDecoder(m).decode_result(regs[:10], 1042, ctx, RECEIVED)
    assert isinstance(rej, Rejected) and "has 10 registers, expected 30" in rej.reason
    rej = ModbusDecoder(m).decode_result([*regs[:5], -3, *regs[6:]], 1042, ctx, RECEIVED)
    assert isinstance(rej, Rejected) and "register +5 is -3" in rej.reason


def test_nan_where_not_allowed_and_bad_codes(ctx: StationContext) -> None:
    m = load_profile("lf-mbtcp").modbus
    assert m is not None
    rej = ModbusDecoder(m).decode_result(
        encode_block(m.result, 1, {**TCP, "leak_rate_sccm": math.nan}), 1, ctx, RECEIVED)
    assert isinstance(rej, Rejected) and rej.reason.startswith("leak_rate_sccm (register +10 "
                                                               "float32): is NaN")
    rej = ModbusDecoder(m).decode_result(encode_block(m.result, 1, {**TCP, "verdict": 7}), 1, ctx,
                                         RECEIVED)
    assert isinstance(rej, Rejected)
    assert "unknown code '7'; expected one of 1, 2, 3, 4" in rej.reason
    regs = encode_block(m.result, 1, TCP)
    regs[20] = 0xC3A4  # UTF-8 "ä" in a part id the profile says is ASCII
    rej = ModbusDecoder(m).decode_result(regs, 1, ctx, RECEIVED)
    assert isinstance(rej, Rejected) and "part_id" in rej.reason and "not valid ascii" in rej.reason


@pytest.mark.parametrize("name", ["lf-mbtcp", "lf-mbrtu"])
def test_calibration_block(ctx: StationContext, name: str) -> None:
    m = load_profile(name).modbus
    assert m is not None and m.calibration is not None
    if name == "lf-mbtcp":
        raw = dict(ended_at=T0, program=2, passed=1, master_loss_pa=38.5, standard_loss_pa=237.75,
                   standard_sccm=3.0, standard_ref_pressure_pa=350.0)
        master, standard, flow = 38.5, 237.75, 3.0
    else:
        raw = dict(ended_at=T0, program=2, passed=0, master_loss_pa=3850, standard_loss_pa=3700,
                   standard_sccm=200, standard_ref_pressure_pa=1379)
        master, standard, flow = 38.5, 37.0, None
    regs = encode_block(m.calibration, 3, raw)
    c = ModbusDecoder(m).decode_calibration(regs, 3, ctx, RECEIVED)
    assert isinstance(c, CalibrationEvent) and c.program == "HX-230"
    assert (c.master_loss_pa, c.standard_loss_pa) == pytest.approx((master, standard))
    assert c.ratio == pytest.approx(standard / master)
    if flow is not None:
        assert c.passed and c.sensitivity == pytest.approx(flow / (standard - master))
    else:
        assert not c.passed and c.sensitivity is None and "no span" in c.reason
    rej = ModbusDecoder(m).decode_calibration(regs, 4, ctx, RECEIVED)
    assert isinstance(rej, Rejected) and "expected calibration counter 4" in rej.reason


def test_counters_and_state() -> None:
    tcp = load_profile("lf-mbtcp").modbus
    rtu = load_profile("lf-mbrtu").modbus
    assert tcp is not None and rtu is not None
    assert ModbusDecoder(tcp).decode_counter([0x0001, 0x0002]) == 0x00010002
    assert ModbusDecoder(rtu).decode_counter([0x0002, 0x0001]) == 0x00010002
    assert ModbusDecoder(rtu).decode_calibration_counter([5, 0]) == 5
    assert tcp.state is not None and (tcp.state.at, tcp.state.width) == (0, 1)
    assert ModbusDecoder(tcp).decode_state([5]) == StationState.CALIBRATING
    assert ModbusDecoder(tcp).decode_state([2]) == StationState.TESTING
    assert ModbusDecoder(tcp).decode_state([6]) is None
    assert ModbusDecoder(rtu).decode_state([3]) == StationState.FAULT
    assert tcp.acknowledge is None and rtu.acknowledge is None
    assert (tcp.framer, tcp.device_id, tcp.function) == ("tcp", 1, 3)
    assert (rtu.framer, rtu.device_id, rtu.function, rtu.baudrate) == ("rtu", 7, 4, 19200)
