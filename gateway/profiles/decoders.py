"""The working side of a profile: parsers and decoders compiled from its plain model.

``model`` holds what the loader read (plain, frozen data, no behaviour that reaches the
parsing code); this module turns it into the objects drivers and ``profile check`` use. The
imports run one way only: model <- registers/normalise/lines <- register_block <- decoders.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from datetime import datetime
from typing import Literal

from gateway.errors import DecodeError
from gateway.profiles.lines import SerialParser
from gateway.profiles.model import (
    AckSpec,
    CalibrationEvent,
    ModbusSpec,
    SerialSpec,
    StationContext,
    TestResult,
)
from gateway.profiles.register_block import BlockDecoder, counter_reader
from gateway.profiles.registers import decode_registers, encode_value
from gateway.records import Rejected, StationState

__all__ = ["ModbusDecoder", "ack_registers", "serial_parser"]


def serial_parser(spec: SerialSpec, ctx: StationContext) -> SerialParser:
    """A station's line/answer parser (its per-field converters are built once, here)."""
    return SerialParser(spec, ctx)


def ack_registers(ack: AckSpec, cycle: int,
                  word_order: Literal["big", "little"] = "big") -> list[int]:
    """The registers that acknowledge ``cycle`` (written only when the profile asks)."""
    return encode_value(cycle, ack.type, word_order=word_order)


class ModbusDecoder:
    """Counters, state, result slots and calibration blocks of one Modbus profile."""

    def __init__(self, spec: ModbusSpec) -> None:
        self.spec = spec
        # block decoders compiled for the station last asked about (a reader has one)
        self._compiled: tuple[StationContext, BlockDecoder, BlockDecoder | None] | None = None
        self._counters: dict[str, Callable[[Sequence[int]], int | None]] = {}

    def _blocks(self, ctx: StationContext) -> tuple[BlockDecoder, BlockDecoder | None]:
        compiled = self._compiled
        if compiled is None or compiled[0] is not ctx:
            cal = self.spec.calibration
            compiled = self._compiled = (
                ctx, BlockDecoder(self.spec, "result", self.spec.result, ctx),
                BlockDecoder(self.spec, "calibration", cal, ctx) if cal is not None else None)
        return compiled[1], compiled[2]

    def decode_counter(self, regs: Sequence[int]) -> int:
        """The result counter from its registers as read (DecodeError if they are not words)."""
        return self._counter(regs, self.spec.result.counter_type)

    def decode_calibration_counter(self, regs: Sequence[int]) -> int:
        if self.spec.calibration is None:
            raise ValueError("this profile has no calibration block")
        return self._counter(regs, self.spec.calibration.counter_type)

    def _counter(self, regs: Sequence[int], type_name: str) -> int:
        fast = self._counters.get(type_name)
        if fast is None:
            fast = self._counters[type_name] = counter_reader(
                type_name, self.spec.word_order, self.spec.byte_order)
        quick = fast(regs)
        if quick is not None:
            return quick
        # not plain words, or an unusual type: decode_registers says exactly what is wrong
        value = decode_registers(list(regs), type_name, word_order=self.spec.word_order,
                                 byte_order=self.spec.byte_order)
        assert isinstance(value, int)
        return value

    def decode_state(self, regs: Sequence[int]) -> StationState | None:
        """The station state, or None when the register holds a code the profile does not map."""
        state = self.spec.state
        if state is None:
            return None
        try:
            value = decode_registers(list(regs), state.type, word_order=state.word_order,
                                     byte_order=state.byte_order)
        except DecodeError:
            return None
        return self.spec.state_map.get(value) if isinstance(value, int) else None

    def decode_result(self, regs: Sequence[int], expected_cycle: int, ctx: StationContext,
                      received_at: datetime) -> TestResult | Rejected:
        address = self.spec.result.slot_address(expected_cycle)
        out = self._blocks(ctx)[0](address, regs, expected_cycle, received_at)
        assert not isinstance(out, CalibrationEvent)
        return out

    def decode_calibration(self, regs: Sequence[int], expected_counter: int,
                           ctx: StationContext, received_at: datetime
                           ) -> CalibrationEvent | Rejected:
        block = self.spec.calibration
        if block is None:
            raise ValueError("this profile has no calibration block")
        decode = self._blocks(ctx)[1]
        assert decode is not None
        out = decode(block.address, regs, expected_counter, received_at)
        assert not isinstance(out, TestResult)
        return out
