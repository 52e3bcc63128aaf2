"""A Modbus station's newest pressure curve (``[modbus.trace]``), read after its results.

The station writes a curve's header and samples, then bumps the curve counter, so a read is
consistent when the counter is the same before and after it; a counter that moved in between
means the block was being rewritten, and the newer curve is read at the next poll. Curves
the station overwrote before the gateway got to them are a loss on record (a ``GapEvent`` with
source "trace", numbered by the curve counter), never silence. At first contact the curve
the station holds is taken only when its record was read in the same poll (it was journalled
before otherwise, or is older than anything the gateway saw). A result's curve whose result
the gateway has not read yet (the station wrote both between the gateway's two reads) waits
for it, up to ``WAIT_POLLS`` polls, so it takes its result's time.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from datetime import datetime
from typing import TYPE_CHECKING

from gateway.drivers.base import Item, utcnow
from gateway.profiles.model import ModbusSpec, StationContext
from gateway.profiles.normalise import reject
from gateway.profiles.registers import decode_registers, type_width
from gateway.profiles.trace_schema import TraceBlock, TraceRegister
from gateway.profiles.traces import (
    TraceError,
    build_trace,
    header_from_registers,
    sample_reader,
    tie,
)
from gateway.records import CalibrationEvent, GapEvent, TestResult

if TYPE_CHECKING:
    from gateway.drivers.modbus_outcome import RegisterLink

__all__ = ["MAX_READ", "CurveReader"]

log = logging.getLogger(__name__)

#: registers per request (the Modbus limit for function 3/4 is 125)
MAX_READ = 120
#: polls a result's curve waits for its result to be read before it is taken untied
WAIT_POLLS = 3


class CurveReader:
    """Reads one station's curve block when its counter moves."""

    def __init__(self, spec: ModbusSpec, context: StationContext, device_id: int) -> None:
        assert spec.trace is not None
        self.spec = spec
        self.block: TraceBlock = spec.trace
        self.context = context
        self.device_id = device_id
        self.label = spec.profile_label
        self._width = 2 if self.block.counter_type == "uint32" else 1
        self._mod = 2 ** (16 * self._width)
        self.seen: int | None = None
        self._to_pa = sample_reader(self.block.samples.unit, self.block.samples.scale)
        self.last_result: TestResult | None = None
        self.last_calibration: CalibrationEvent | None = None
        self._waited = 0
        header = {"cycle": self.block.cycle, "count": self.block.count}
        if self.block.role is not None:
            header["role"] = self.block.role
        if self.block.interval is not None:
            header["interval"] = self.block.interval
        header |= {f"phase:{k}": v for k, v in self.block.phases.items()}
        self._header: dict[str, TraceRegister] = header
        lo = min(r.address for r in header.values())
        hi = max(r.address + type_width(r.type) for r in header.values())
        self._header_span = (lo, hi - lo)

    async def _read(self, link: RegisterLink, address: int, count: int) -> list[int]:
        out: list[int] = []
        while count > 0:
            n = min(count, MAX_READ)
            out += await link.read(self.spec.function, address, n, self.device_id)
            address += n
            count -= n
        return out

    async def _counter(self, link: RegisterLink) -> int:
        regs = await link.read(self.spec.function, self.block.counter_address, self._width,
                               self.device_id)
        return int(decode_registers(regs, self.block.counter_type,
                                    word_order=self.spec.word_order,
                                    byte_order=self.spec.byte_order))

    def _saw(self, items: Sequence[Item]) -> set[int]:
        cycles: set[int] = set()
        for item in items:
            if type(item) is TestResult:
                self.last_result = item
                cycles.add(item.cycle)
            elif type(item) is CalibrationEvent:
                self.last_calibration = item
        return cycles

    async def poll(self, link: RegisterLink, items: Sequence[Item]) -> list[Item]:
        """The curve (or its loss) since the last poll; ``items`` are what this poll read.

        Raises what the link raises; the counter is only advanced after a consistent read,
        so a failed read is tried again at the next poll."""
        new_cycles = self._saw(items)
        counter = await self._counter(link)
        if counter == self.seen:
            return []
        first_contact = self.seen is None
        lo, count = self._header_span
        header_regs = await self._read(link, lo, count)
        values = {name: self._value(reg, header_regs, lo) for name, reg in self._header.items()}
        n = values["count"]
        received_at = utcnow()
        out: list[Item] = []
        if first_contact and values["cycle"] not in new_cycles:
            self.seen = counter
            return out
        if self._ahead(values) and self._waited < WAIT_POLLS:
            self._waited += 1
            return out  # its result comes with the next poll's ring read
        self._waited = 0
        if not 2 <= n <= self.block.samples.max:
            self.seen = counter
            out.append(reject(self.context, self.label, f"curve {counter}: {n} samples",
                              f"trace sample count {n} outside 2..{self.block.samples.max}",
                              received_at))
            return out
        width = type_width(self.block.samples.type or "uint16")
        regs = await self._read(link, self.block.samples.address or 0, n * width)
        if await self._counter(link) != counter:
            return out  # rewritten while read: the newer curve comes next poll
        out += self._gap(counter, received_at)
        self.seen = counter
        try:
            samples = [self._to_pa(float(decode_registers(
                regs[i:i + width], self.block.samples.type or "uint16",
                word_order=self.spec.word_order, byte_order=self.spec.byte_order)))
                for i in range(0, n * width, width)]
            header = header_from_registers(self.block, values)
            tied = tie(header.role, header.cycle, self.last_result, self.last_calibration)
            out.append(build_trace(header, samples, phase_unit=self.block.phase_unit,
                                   ctx=self.context, label=self.label, tied=tied,
                                   received_at=received_at))
        except (TraceError, ValueError) as exc:
            out.append(reject(self.context, self.label, f"curve {counter}: "
                              f"{' '.join(f'{w:04x}' for w in header_regs)}", str(exc),
                              received_at))
        return out

    def _ahead(self, values: dict[str, int]) -> bool:
        """A result's curve newer than the newest result read (cycles as the station counts)."""
        if self.block.role is not None and self.block.role.codes is not None and \
                self.block.role.codes.get(str(values.get("role"))) not in (None, "result"):
            return False
        last = self.last_result
        if last is None:
            return True
        ahead = (values["cycle"] - last.cycle) % 2**32
        return 0 < ahead < 2**31

    def _value(self, reg: TraceRegister, regs: list[int], lo: int) -> int:
        at = reg.address - lo
        raw = decode_registers(regs[at:at + type_width(reg.type)], reg.type,
                               word_order=self.spec.word_order, byte_order=self.spec.byte_order)
        return int(raw)

    def _gap(self, counter: int, at: datetime) -> list[Item]:
        if self.seen is None:
            return []
        skipped = (counter - self.seen) % self._mod - 1
        if skipped <= 0:
            return []
        first, last = (self.seen + 1) % self._mod, (counter - 1) % self._mod
        return [GapEvent(station=self.context.station, at=at, first=first, last=last,
                         source="trace", line=self.context.line,
                         detail=f"{skipped} pressure curve(s) overwritten before they were read "
                                f"(curve numbers {first}..{last})")]
