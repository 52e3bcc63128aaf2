"""Register codecs against pymodbus's own convert_from_registers (the reference decoder)."""

from __future__ import annotations

import math
import struct

import pytest
from hypothesis import given
from hypothesis import strategies as st
from pymodbus.client import ModbusTcpClient

from gateway.errors import DecodeError
from gateway.profiles.registers import decode_registers, encode_value, parse_type

DT = ModbusTcpClient.DATATYPE
PYMODBUS_TYPES = {"int16": DT.INT16, "uint16": DT.UINT16, "int32": DT.INT32,
                  "uint32": DT.UINT32, "float32": DT.FLOAT32}


def _swap_bytes(regs: list[int]) -> list[int]:
    return [((r & 0xFF) << 8) | (r >> 8) for r in regs]


def reference(regs: list[int], type_name: str, word_order: str, byte_order: str) -> object:
    """pymodbus decodes high byte first; a byte-swapped device is undone before handing over.

    One value per call: with several values and word_order="little" pymodbus 3.16 returns the
    list reversed (known issue), so we never ask it for more than one.
    """
    words = _swap_bytes(regs) if byte_order == "little" else list(regs)
    return ModbusTcpClient.convert_from_registers(
        words, data_type=PYMODBUS_TYPES[type_name], word_order=word_order  # type: ignore[arg-type]
    )


# The four float32 layouts as device manuals name them (common practice): 123.456 = 0x42F6E979.
@pytest.mark.parametrize(
    ("word_order", "byte_order", "regs"),
    [
        ("big", "big", [0x42F6, 0xE979]),  # ABCD
        ("little", "big", [0xE979, 0x42F6]),  # CDAB
        ("big", "little", [0xF642, 0x79E9]),  # BADC
        ("little", "little", [0x79E9, 0xF642]),  # DCBA
    ],
)
def test_float32_four_word_orders(word_order: str, byte_order: str, regs: list[int]) -> None:
    ours = decode_registers(regs, "float32", word_order=word_order,  # type: ignore[arg-type]
                            byte_order=byte_order)  # type: ignore[arg-type]
    theirs = reference(regs, "float32", word_order, byte_order)
    assert ours == theirs
    assert ours == pytest.approx(123.456, rel=1e-7)
    assert encode_value(123.456, "float32", word_order=word_order,  # type: ignore[arg-type]
                        byte_order=byte_order) == regs  # type: ignore[arg-type]


@pytest.mark.parametrize("word_order", ["big", "little"])
@pytest.mark.parametrize("byte_order", ["big", "little"])
@given(regs=st.lists(st.integers(0, 0xFFFF), min_size=2, max_size=2))
def test_32bit_types_match_pymodbus(word_order: str, byte_order: str, regs: list[int]) -> None:
    for type_name in ("int32", "uint32", "float32"):
        ours = decode_registers(regs, type_name, word_order=word_order,  # type: ignore[arg-type]
                                byte_order=byte_order)  # type: ignore[arg-type]
        theirs = reference(regs, type_name, word_order, byte_order)
        if isinstance(ours, float) and math.isnan(ours):
            assert isinstance(theirs, float) and math.isnan(theirs)
        else:
            assert ours == theirs


@given(reg=st.integers(0, 0xFFFF))
def test_16bit_types_match_pymodbus(reg: int) -> None:
    for type_name in ("int16", "uint16"):
        assert decode_registers([reg], type_name) == reference([reg], type_name, "big", "big")


def test_int32_min_and_known_values() -> None:
    # INT32_MIN is 0x80000000; CDAB puts the low word first (sim/README.md lf-mbrtu).
    assert decode_registers([0x0000, 0x8000], "int32", word_order="little") == -2147483648
    assert decode_registers([0x8000, 0x0000], "int32") == -2147483648
    assert decode_registers([0x0001, 0x0000], "uint32", word_order="little") == 1
    assert decode_registers([0xFFFF], "int16") == -1


def test_strings_both_byte_orders() -> None:
    # pymodbus reads strings high byte first: our "big" must agree with it.
    regs = encode_value("HX210-004711", "string(8)")
    assert decode_registers(regs, "string(8)") == "HX210-004711"
    theirs = ModbusTcpClient.convert_from_registers(regs, data_type=DT.STRING)
    assert isinstance(theirs, str) and theirs.rstrip("\x00") == "HX210-004711"
    low = encode_value("MV44-012", "string(4)", byte_order="little")
    assert low[0] == (ord("V") << 8) | ord("M")  # low byte first: 'M' in the low byte
    assert decode_registers(low, "string(4)", byte_order="little") == "MV44-012"
    assert decode_registers(_swap_bytes(low), "string(4)") == "MV44-012"


def test_string_not_ascii_and_wrong_width() -> None:
    with pytest.raises(DecodeError, match="not valid ascii"):
        decode_registers([0xFF41], "string(1)")
    with pytest.raises(DecodeError, match="needs 2 registers"):
        decode_registers([1], "uint32")
    with pytest.raises(DecodeError, match=r"expected an integer 0\.\.65535"):
        decode_registers([70000], "uint16")
    with pytest.raises(DecodeError, match="unknown register type"):
        parse_type("float64")


@given(value=st.floats(width=32, allow_nan=False),
       wo=st.sampled_from(["big", "little"]), bo=st.sampled_from(["big", "little"]))
def test_float32_round_trip(value: float, wo: str, bo: str) -> None:
    regs = encode_value(value, "float32", word_order=wo, byte_order=bo)  # type: ignore[arg-type]
    back = decode_registers(regs, "float32", word_order=wo, byte_order=bo)  # type: ignore[arg-type]
    assert struct.pack(">f", back) == struct.pack(">f", value)
