"""The compiled block decoder decides exactly as the interpreter it stands in for.

``BlockDecoder`` (layout work done once per station) against ``normalise.decode_block`` (the
profile interpreted per block), and ``counter_reader`` against ``decode_registers``: the same
record or the same rejection for every block, over every built-in Modbus profile, with
random words, NaN and sentinel values, torn guards, wrong lengths and non-words.
``decode_registers`` itself is checked against pymodbus's codec in test_registers.py.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from gateway.errors import DecodeError
from gateway.profiles import StationContext, builtin_profiles, load_profile
from gateway.profiles.model import BlockSpec, ModbusSpec, RingSpec
from gateway.profiles.normalise import decode_block
from gateway.profiles.register_block import BlockDecoder, counter_reader
from gateway.profiles.registers import decode_registers
from tests.gateway.profiles.blocks import encode_block

CTX = StationContext("L1-S1", "L1", "Europe/Berlin", {1: "HX-210", 2: "HX-230"})
AT = datetime(2026, 12, 4, 7, 0, tzinfo=UTC)
# words that sit on edges: zero, all ones, float32 NaN and infinity halves, sign bits
EDGE_WORDS = [0, 1, 2, 3, 4, 0xFFFF, 0x7FC0, 0x7F80, 0xFF80, 0x8000, 0x7FFF, 0x4120, 0x3F80]


def _blocks() -> list[tuple[str, ModbusSpec, str, RingSpec | BlockSpec]]:
    out: list[tuple[str, ModbusSpec, str, RingSpec | BlockSpec]] = []
    for name in builtin_profiles():
        spec = load_profile(name).modbus
        if spec is None:
            continue
        out.append((name, spec, "result", spec.result))
        if spec.calibration is not None:
            out.append((name, spec, "calibration", spec.calibration))
    return out


BLOCKS = _blocks()


def _outcome(fn: Any) -> tuple[str, Any]:
    try:
        return ("value", fn())
    except Exception as exc:  # the two must fail alike too
        return ("error", (type(exc), str(exc)))


def _address(block: RingSpec | BlockSpec, expected: int) -> int:
    return block.slot_address(expected) if isinstance(block, RingSpec) else block.address


@pytest.mark.parametrize(("name", "spec", "record", "block"), BLOCKS,
                         ids=[f"{b[0]}-{b[2]}" for b in BLOCKS])
@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_compiled_block_matches_the_interpreter(
    name: str, spec: ModbusSpec, record: str, block: RingSpec | BlockSpec, data: st.DataObject
) -> None:
    expected = data.draw(st.integers(0, 70000), label="expected")
    # a block the station would write (guards right), then words overwritten at random
    regs = encode_block(block, expected % 2 ** (16 * block.counter_registers), {})
    word = st.one_of(st.sampled_from(EDGE_WORDS), st.integers(0, 0xFFFF))
    for i in data.draw(st.lists(st.integers(0, block.length - 1), max_size=block.length),
                       label="overwrite"):
        regs[i] = data.draw(word)
    shape = data.draw(st.sampled_from(["ok", "ok", "ok", "short", "bool", "big", "tuple"]))
    given_regs: Any = regs
    if shape == "short":
        given_regs = regs[:-1]
    elif shape == "bool":
        given_regs = [True, *regs[1:]]
    elif shape == "big":
        given_regs = [*regs[:-1], 0x10000]
    elif shape == "tuple":
        given_regs = tuple(regs)
    address = _address(block, expected)
    compiled = BlockDecoder(spec, record, block, CTX)
    ours = _outcome(lambda: compiled(address, given_regs, expected, AT))
    reference = _outcome(lambda: decode_block(spec, record, block, address, given_regs,
                                              expected, CTX, AT))
    assert ours == reference


@pytest.mark.parametrize(("name", "spec", "record", "block"), BLOCKS,
                         ids=[f"{b[0]}-{b[2]}" for b in BLOCKS])
def test_compiled_block_decodes_the_sample_values(
    name: str, spec: ModbusSpec, record: str, block: RingSpec | BlockSpec
) -> None:
    """A whole, well-formed block (every field zero but the guards) decodes alike."""
    regs = encode_block(block, 7, {})
    address = _address(block, 7)
    assert BlockDecoder(spec, record, block, CTX)(address, regs, 7, AT) == decode_block(
        spec, record, block, address, regs, 7, CTX, AT)


@pytest.mark.parametrize("type_name", ["uint16", "int16", "uint32", "int32", "float32", "bogus"])
@pytest.mark.parametrize("word_order", ["big", "little"])
@pytest.mark.parametrize("byte_order", ["big", "little"])
@given(regs=st.lists(st.one_of(st.sampled_from(EDGE_WORDS), st.integers(-2, 0x10001)),
                     min_size=0, max_size=3))
def test_counter_reader_matches_decode_registers(
    type_name: str, word_order: str, byte_order: str, regs: list[int]
) -> None:
    fast = counter_reader(type_name, word_order, byte_order)(regs)
    try:
        reference: Any = decode_registers(list(regs), type_name, word_order=word_order,  # type: ignore[arg-type]
                                          byte_order=byte_order)  # type: ignore[arg-type]
    except DecodeError:
        reference = None
    if fast is not None:  # None: the caller asks decode_registers, which gives the reference
        assert fast == reference
        assert type(fast) is int
