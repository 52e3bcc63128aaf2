"""Modbus stations with one last-result block and no ring: detect, read, acknowledge.

The detection rule and its consistency argument are stated in
gateway/profiles/modbus_schema.py (``LatestRule``). One block read per result when the cycle
lives in the block (counter and flag modes: flag + block + ack = three round trips, counter
mode two); change detection needs a second equal read. A jump of the cycle by more than one
is a gap on record (``GapEvent``, source "sequence"): the station dropped what it could not
hold. Nothing is written unless the rule lists an ``ack``.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from datetime import datetime
from typing import TYPE_CHECKING, Protocol

from gateway.drivers.base import Item, utcnow
from gateway.drivers.modbus_outcome import PollOutcome
from gateway.errors import ProtocolError, TransportError
from gateway.profiles.registers import decode_registers, encode_value
from gateway.records import (
    CalibrationEvent,
    GapEvent,
    Rejected,
    StationState,
    StationStatus,
    TestResult,
)

if TYPE_CHECKING:
    from gateway.profiles import ModbusSpec, StationContext
    from gateway.profiles.modbus_schema import LatestRule
    from gateway.profiles.model import BlockSpec

__all__ = ["BitLink", "LatestReader"]

log = logging.getLogger(__name__)


class BitLink(Protocol):
    """Registers and single bits: reads with functions 1-4, writes with 5, 6 and 16."""

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        """Registers (3, 4) or bits as 0/1 (1, 2)."""

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        """Holding registers (function 6 or 16)."""

    async def write_coil(self, address: int, value: bool, device_id: int) -> None:
        """One coil (function 5)."""


class LatestReader:
    """Takes each new record of a single-block station once, by the profile's rule."""

    def __init__(
        self,
        station: str,
        spec: ModbusSpec,
        block: BlockSpec,
        rule: LatestRule,
        context: StationContext,
        *,
        resume_cycle: int | None = None,
        device_id: int | None = None,
    ) -> None:
        self.station, self.spec, self.block, self.rule, self.context = (
            station, spec, block, rule, context
        )
        self.device_id = spec.device_id if device_id is None else device_id
        self.seen: int | None = resume_cycle  # newest cycle taken
        self._mod = 1 << (16 * rule.cycle_registers)
        self._candidate: list[int] | None = None  # change mode: a block seen once
        self._last_block: list[int] | None = None
        self._ack_due: int | None = None  # a taken cycle whose acknowledge did not go through

    def _cycle(self, regs: Sequence[int]) -> int:
        at, width = self.rule.cycle_at, self.rule.cycle_registers
        value = decode_registers(list(regs[at : at + width]), self.rule.cycle_type,
                                 word_order=self.rule.word_order,
                                 byte_order=self.rule.byte_order)
        assert isinstance(value, int)
        return value

    async def _flag_set(self, link: BitLink) -> bool:
        flag = self.rule.flag
        assert flag is not None
        values = await link.read(flag.function, flag.address, 1, self.device_id)
        if flag.function in (1, 2):
            return bool(values[0])
        return bool(values[0] >> flag.bit & 1)

    def pending_ack(self) -> None:
        """Acknowledges are written inside ``poll`` (right after the block is taken)."""
        return None

    def drain_pending(self) -> list[Item]:
        return []

    async def poll(self, link: BitLink, *, take_results: bool = True) -> PollOutcome:
        out = PollOutcome()
        if not take_results:
            return out  # the journal is full: the station keeps its block (and its flag)
        if self._ack_due is not None:
            await self._acknowledge(link, self._ack_due)
        if self.rule.detect == "flag" and not await self._flag_set(link):
            return out
        regs = await link.read(self.spec.function, self.rule.address, self.rule.length,
                               self.device_id)
        if self.rule.bits is not None:  # coils / discrete inputs as one more word
            src = self.rule.bits
            bits = await link.read(src.function, src.address, src.count, self.device_id)
            regs = [*regs, sum(1 << i for i, b in enumerate(bits[: src.count]) if b)]
        received_at = utcnow()
        cycle = self._cycle(regs)
        out.counter = cycle
        if not any(regs[: self.rule.length]):
            # a block of zeros was never written (a station just powered up, or one that
            # clears its block): no record, whatever the detection rule
            self._candidate = None
            return out
        if self.rule.detect == "change":
            if regs == self._last_block:
                self._candidate = None
                return out  # unchanged since the record we took (or the first look)
            if self._candidate != regs:
                self._candidate = list(regs)  # changed once: take it when a read agrees
                return out
            self._candidate = None
            self._last_block = list(regs)
            if cycle == self.seen:
                return out  # the block we took before a restart: already journalled
        elif self.rule.detect == "counter" and cycle == self.seen:
            return out
        self._note_gap(cycle, received_at, out)
        decoded = self._decode(regs, cycle, received_at)
        out.items.append(decoded)
        if not isinstance(decoded, Rejected):
            out.accepted += 1
        self.seen = cycle
        await self._acknowledge(link, cycle)
        return out

    def _note_gap(self, cycle: int, at: datetime, out: PollOutcome) -> None:
        if self.seen is None:
            return  # first contact: the block is all the station holds
        ahead = (cycle - self.seen) % self._mod
        if ahead <= 1 or ahead > self._mod // 2:
            return  # the next cycle, a repeat, or a reset (counting again)
        first, last = (self.seen + 1) % self._mod, (cycle - 1) % self._mod
        why = ("came and went between two reads of the block" if self.rule.detect == "change"
               else "ran while the station held an unacknowledged record")
        detail = f"gap: {ahead - 1} cycle(s) {first}..{last} {why}"
        log.warning("%s: %s", self.station, detail)
        out.missed += ahead - 1
        out.items.append(StationStatus(station=self.station, at=at,
                                       state=out.state or StationState.ONLINE, detail=detail))
        out.items.append(GapEvent(station=self.station, at=at, first=first, last=last,
                                  source="sequence", detail=detail, line=self.context.line))

    def _decode(
        self, regs: list[int], cycle: int, at: datetime
    ) -> TestResult | CalibrationEvent | Rejected:
        from gateway.profiles.normalise import decode_block

        # the cycle inside the block is both guards: one read, nothing to tear between them
        return decode_block(self.spec, self.rule.record, self.block, self.rule.address, regs,
                            cycle, self.context, at)

    async def _acknowledge(self, link: BitLink, cycle: int) -> None:
        """Write the acknowledge; on failure keep it due, so the taken record is not lost
        with the poll and the station is acknowledged at the next poll."""
        self._ack_due = cycle if self.rule.ack else None
        try:
            await self._write_ack(link, cycle)
        except (ProtocolError, TransportError) as exc:
            log.warning("%s: acknowledge of cycle %d failed (%s); retried next poll",
                        self.station, cycle, exc)
            return
        self._ack_due = None

    async def _write_ack(self, link: BitLink, cycle: int) -> None:
        for act in self.rule.ack:
            value = 0 if act.value == "clear" else cycle if act.value == "cycle" else act.value
            assert isinstance(value, int)
            if act.function == 5:
                await link.write_coil(act.address, bool(value), self.device_id)
            else:
                regs = encode_value(value % (1 << (16 * (2 if act.type == "uint32" else 1))),
                                    act.type, word_order=self.rule.word_order)
                await link.write(act.address, regs, self.device_id)
