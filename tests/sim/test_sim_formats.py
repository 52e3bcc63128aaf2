"""Wire encoders: lines as sim/README.md shows them, registers as pymodbus's codecs read them."""

from __future__ import annotations

import math
from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import pytest
from hypothesis import given
from hypothesis import strategies as st
from pymodbus.client import ModbusTcpClient

from gateway.records import Verdict
from gateway.units import to_canonical
from sim.formats import (
    decode_string,
    delim_calibration,
    delim_result,
    encode_f32,
    encode_i32,
    encode_string,
    encode_u32,
    kv_calibration,
    kv_result,
    modbus_result,
)
from sim.station import SimCalibration, SimResult

DT = ModbusTcpClient.DATATYPE
convert = ModbusTcpClient.convert_from_registers
WHEN = datetime(2026, 12, 2, 6, 15, 9, 400000, tzinfo=UTC)


def _result(**kw: object) -> SimResult:
    base: dict[str, object] = {
        "station": "L1-S1",
        "line": "L1",
        "cycle": 1042,
        "ended_at": WHEN,
        "station_time": WHEN,
        "program_no": 1,
        "program": "HX-210",
        "part_id": "HX210-004711",
        "verdict": Verdict.PASS,
        "reason": "",
        "test_pressure_pa": 350_021.0,
        "pressure_loss_pa": 41.84,
        "leak_rate_sccm": 0.21349,
        "reject_limit_sccm": 2.0,
        "lower_limit_sccm": -1.0,
        "fill_s": 3.0,
        "stabilise_s": 8.0,
        "test_s": 10.0,
        "temperature_c": 22.409,
        "true_leak_sccm": 0.2,
    }
    base.update(kw)
    return SimResult(**base)  # type: ignore[arg-type]


def test_delim_result_line_matches_readme_example() -> None:
    enc = delim_result(_result(), ZoneInfo("UTC"))
    # the README's example line, field for field
    expected = "R;1042;2026-12-02 06:15:09;HX-210;HX210-004711;ACC;350.02;41.8;0.213;2.000;-1.000;"
    assert enc.payload == (expected + "3.0;8.0;10.0;22.41").encode()
    assert enc.reported["test_pressure_pa"] == pytest.approx(350_020.0)
    assert enc.reported["ended_at"] == "2026-12-02T06:15:09Z"
    assert enc.resolution["leak_rate_sccm"] == 0.001


def test_delim_local_time_and_empty_fields() -> None:
    enc = delim_result(
        _result(part_id=None, lower_limit_sccm=None, leak_rate_sccm=-0.0001),
        ZoneInfo("Europe/Berlin"),
    )
    fields = enc.payload.decode().split(";")
    assert fields[2] == "2026-12-02 07:15:09"  # CET = UTC+1 in December
    assert fields[4] == "" and fields[10] == ""
    assert fields[8] == "0.000"  # never "-0.000"
    assert enc.reported["ended_at"] == "2026-12-02T06:15:09Z"


def test_delim_calibration_line() -> None:
    cal = SimCalibration(
        "L1-S1",
        "L1",
        3,
        WHEN,
        WHEN,
        1,
        "HX-210",
        38.61,
        237.93,
        3.0,
        350_000.0,
        237.93 / 38.61,
        3.0 / (237.93 - 38.61),
        True,
        "",
        "LS-1",
    )
    enc = delim_calibration(cal, ZoneInfo("UTC"))
    assert enc.payload == b"C;2026-12-02 06:15:09;HX-210;38.6;237.9;3.000;350.0;6.162;OK"
    assert enc.reported["sensitivity"] == pytest.approx(3.0 / (237.9 - 38.6))


def test_kv_answers_use_psi() -> None:
    enc = kv_result(_result())
    lines = enc.payload
    assert lines[0] == "TYPE=RES" and lines[-1] == "END"
    values = dict(line.split("=", 1) for line in lines[:-1])
    assert values["TS"] == "2026-12-02T06:15:09Z"
    assert values["VRD"] == "GOOD" and values["PU"] == "psi"
    # 41.84 Pa = 0.0060684 psi (NIST SP 811: 1 psi = 6894.757293168 Pa)
    assert values["DP"] == "0.00607"
    assert enc.reported["pressure_loss_pa"] == pytest.approx(0.00607 * 6894.757293168)
    cal = SimCalibration(
        "K1",
        "L1",
        1,
        WHEN,
        WHEN,
        1,
        "MV-44",
        56.0,
        260.0,
        2.0,
        137_895.0,
        260 / 56,
        2 / 204,
        False,
        "",
        "LS",
    )
    kv = dict(line.split("=", 1) for line in kv_calibration(cal).payload[:-1])
    assert kv["OK"] == "0" and kv["STDP"] == "20.000"


@given(st.integers(0, 2**32 - 1))
def test_u32_matches_pymodbus(value: int) -> None:
    assert convert(encode_u32(value, "big"), DT.UINT32, word_order="big") == value
    assert convert(encode_u32(value, "little"), DT.UINT32, word_order="little") == value


@given(st.integers(-(2**31), 2**31 - 1))
def test_i32_matches_pymodbus(value: int) -> None:
    assert convert(encode_i32(value, "big"), DT.INT32, word_order="big") == value
    assert convert(encode_i32(value, "little"), DT.INT32, word_order="little") == value


@given(st.floats(allow_nan=False, allow_infinity=False, width=32))
def test_f32_matches_pymodbus(value: float) -> None:
    assert convert(encode_f32(value, "big"), DT.FLOAT32, word_order="big") == value
    assert convert(encode_f32(value, "little"), DT.FLOAT32, word_order="little") == value


def test_nan_lower_limit_and_strings() -> None:
    assert math.isnan(float(convert(encode_f32(math.nan), DT.FLOAT32)))  # type: ignore[arg-type]
    regs = encode_string("HX210-004711", 8, "high")
    assert convert(regs, DT.STRING) == "HX210-004711"
    low = encode_string("M4100012", 4, "low")
    swapped = [((r & 0xFF) << 8) | (r >> 8) for r in low]  # pymodbus reads high byte first
    assert convert(swapped, DT.STRING) == "M4100012"
    assert decode_string(low, "low") == "M4100012"


def test_rtu_slot_scaling() -> None:
    enc = modbus_result("lf-mbrtu", _result(part_id="HX100001"))
    regs = enc.payload
    assert len(regs) == 25
    assert convert(regs[0:2], DT.UINT32, word_order="little") == 1042  # head guard
    assert regs[6] == 3500  # 350.021 kPa in mbar
    leak = convert(regs[9:11], DT.INT32, word_order="little")
    assert isinstance(leak, int)
    # 1 mbar·L/s = 59.2154 sccm (at the same reference temperature)
    assert int(leak) * 1e-5 * 59.2154 == pytest.approx(0.21349, abs=1e-3)
    assert enc.reported["leak_rate_sccm"] == pytest.approx(
        to_canonical(int(leak) * 1e-5, "mbar*L/s", "leak")
    )
    assert convert(regs[23:25], DT.UINT32, word_order="little") == 1042
