"""Hostile input never escapes as an exception: every bad line or block becomes a Rejected."""

from __future__ import annotations

from collections.abc import Sequence

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from gateway.profiles import StationContext, builtin_profiles, load_profile
from gateway.profiles.decoders import ModbusDecoder, serial_parser
from gateway.records import CalibrationEvent, Rejected, TestResult
from tests.gateway.profiles.conftest import RECEIVED

CTX = StationContext("L1-S1", "L1", "Europe/Berlin", {1: "HX-210"})
SERIAL = [load_profile(n) for n in builtin_profiles() if load_profile(n).transport == "serial"]
MODBUS = [load_profile(n) for n in builtin_profiles() if load_profile(n).transport == "modbus"]
FAST = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _ok(items: Sequence[object]) -> None:
    for item in items:
        assert isinstance(item, (TestResult, CalibrationEvent, Rejected))
        if isinstance(item, Rejected):
            assert item.reason.strip()


@FAST
@given(data=st.lists(st.binary(max_size=300), min_size=1, max_size=20))
def test_random_bytes(data: list[bytes]) -> None:
    for profile in SERIAL:
        _ok(serial_parser(profile.serial, CTX).parse(data, 1, RECEIVED))  # type: ignore[union-attr]


@FAST
@given(text=st.lists(st.text(max_size=200), min_size=1, max_size=20))
def test_random_text(text: list[str]) -> None:
    for profile in SERIAL:
        _ok(serial_parser(profile.serial, CTX).parse(text, 1, RECEIVED))  # type: ignore[union-attr]


@FAST
@given(fields=st.lists(st.sampled_from(["R", "C", "", "1042", "2026-12-02 07:15:09", "ACC", "OK",
                                        "-1", "1e308", "nan", "HX-210", "0.0", "99999999999"]),
                       max_size=18))
def test_delimited_field_soup(fields: list[str]) -> None:
    parser = serial_parser(load_profile("lf-delim").serial, CTX)  # type: ignore[union-attr]
    _ok(parser.parse([";".join(fields)], 1, RECEIVED))


@FAST
@given(pairs=st.lists(st.tuples(st.sampled_from(["TYPE", "CYC", "TS", "PU", "LU", "P", "DP", "LR",
                                                 "VRD", "OK", "ML", "SL", "x"]),
                                st.sampled_from(["RES", "CAL", "psi", "kPa", "", "1", "-3",
                                                 "2026-12-02T06:15:09Z", "GOOD", "zz"])),
                      max_size=25))
def test_keyvalue_soup(pairs: list[tuple[str, str]]) -> None:
    parser = serial_parser(load_profile("lf-kv").serial, CTX)  # type: ignore[union-attr]
    _ok(parser.parse([f"{k}={v}" for k, v in pairs], 1, RECEIVED))


def test_huge_line() -> None:
    for profile in SERIAL:
        items = serial_parser(profile.serial, CTX).parse(["R;" * 500_000], 1, RECEIVED)  # type: ignore[union-attr]
        assert len(items) == 1 and isinstance(items[0], Rejected)
        assert "max_line" in items[0].reason


@FAST
@given(regs=st.lists(st.integers(0, 0xFFFF), min_size=0, max_size=40), cycle=st.integers(0, 2**32))
def test_random_register_blocks(regs: list[int], cycle: int) -> None:
    for profile in MODBUS:
        m = profile.modbus
        assert m is not None
        _ok([ModbusDecoder(m).decode_result(regs, cycle, CTX, RECEIVED)])
        if m.calibration is not None:
            _ok([ModbusDecoder(m).decode_calibration(regs, cycle, CTX, RECEIVED)])


@FAST
@given(regs=st.lists(st.integers(0, 0xFFFF), min_size=30, max_size=30))
def test_random_blocks_with_valid_guards(regs: list[int]) -> None:
    """Guards right, everything else random: reaches every field decoder."""
    for profile in MODBUS:
        m = profile.modbus
        assert m is not None
        block = regs[: m.result.length]
        guard = [5, 0] if m.result.counter_registers == 2 else [5]
        block[m.result.head_guard : m.result.head_guard + len(guard)] = guard
        block[m.result.tail_guard : m.result.tail_guard + len(guard)] = guard
        cycle = ModbusDecoder(m).decode_counter(guard)
        _ok([ModbusDecoder(m).decode_result(block, cycle, CTX, RECEIVED)])


@FAST
@given(regs=st.lists(st.one_of(st.integers(), st.none(), st.text(max_size=3)), max_size=40))
def test_non_word_registers(regs: list[object]) -> None:
    for profile in MODBUS:
        m = profile.modbus
        assert m is not None
        _ok([ModbusDecoder(m).decode_result(regs, 1, CTX, RECEIVED)])  # type: ignore[arg-type]
