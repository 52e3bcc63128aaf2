"""Build register blocks from a profile's own layout (station side), for tests and samples."""

from __future__ import annotations

from collections.abc import Mapping

from gateway.profiles.model import BlockSpec, RingSpec
from gateway.profiles.registers import encode_value


def encode_block(
    block: RingSpec | BlockSpec, counter: int, raw: Mapping[str, int | float | str]
) -> list[int]:
    """Registers of one slot/block: guards = ``counter``, fields from raw (unscaled) values."""
    regs = [0] * block.length
    width = block.counter_registers

    def put(at: int, words: list[int]) -> None:
        regs[at : at + len(words)] = words

    for at in (block.head_guard, block.tail_guard):
        put(at, encode_value(counter, block.counter_type, word_order=block.word_order,
                             byte_order=block.byte_order)[:width])
    for field in block.fields:
        reg = field.register
        assert reg is not None
        if field.canonical not in raw:
            continue
        put(reg.at, encode_value(raw[field.canonical], reg.type, word_order=reg.word_order,
                                 byte_order=reg.byte_order))
    return regs
