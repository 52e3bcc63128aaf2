"""Modbus stations: the consistent ring read, and the pymodbus link it runs over.

``RingReader`` is the handshake of sim/README.md ("Consistent read") written once for every
Modbus profile: read the result counter, the slots not seen yet (at most a ring's depth back),
the counter again, and accept a slot only when its head and tail guards equal the expected cycle
and it cannot have been overwritten meanwhile. The calibration block is read the same way with
its own counter. It talks to a ``RegisterLink`` (one method, ``read``), so its logic is tested
with scripted register sequences and runs unchanged over TCP or RTU.

A torn block (guards disagree: the station was writing while we read) is not bad station data:
it is retried on the next poll and counted; only a block that stays undecodable goes to the
quarantine. The reader never writes to a station.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections.abc import Sequence
from datetime import datetime
from typing import TYPE_CHECKING, Any

from gateway.aio import within
from gateway.drivers.base import (
    ExceptionReply,
    Item,
    LinkLost,
    NoAnswer,
    Outbox,
    Pacing,
    StationTarget,
    sleep_for,
    utcnow,
)
from gateway.drivers.lines import split_host_port
from gateway.drivers.modbus_latest import LatestReader
from gateway.drivers.modbus_outcome import PollOutcome, RegisterLink
from gateway.drivers.modbus_trace import CurveReader
from gateway.errors import DecodeError, ProtocolError, TransportError
from gateway.profiles.decoders import ModbusDecoder, ack_registers
from gateway.profiles.model import BlockSpec
from gateway.profiles.registers import decode_registers
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

__all__ = [
    "MAX_READ",
    "PollOutcome",
    "PymodbusLink",
    "RegisterLink",
    "RingReader",
    "plan_reads",
    "run_modbus_bus",
]

log = logging.getLogger(__name__)

MAX_READ = 125  # registers per read request (Modbus application protocol spec, 6.3)
_MERGE_GAP = 16  # read a few unused registers rather than make another round trip
_MAX_TORN_RETRIES = 5


def field_span(spec_field: Any) -> tuple[int, int]:
    """(address, register count) of a profile register field."""
    return int(spec_field.at), int(spec_field.width)


def plan_reads(spans: Sequence[tuple[int, int]]) -> list[tuple[int, int]]:
    """Merge (address, count) spans into as few reads as the 125-register limit allows."""
    out: list[list[int]] = []
    for address, count in sorted(spans):
        if out:
            start, n = out[-1]
            end = max(start + n, address + count)
            if address <= start + n + _MERGE_GAP and end - start <= MAX_READ:
                out[-1][1] = end - start
                continue
        out.append([address, count])
    return [(a, n) for a, n in out]


class RingReader:
    """Consistent reads of one station's result ring and calibration block."""

    def __init__(
        self,
        station: str,
        profile_label: str,
        spec: ModbusSpec,
        context: StationContext,
        *,
        resume_cycle: int | None = None,
        device_id: int | None = None,
        max_torn_retries: int = _MAX_TORN_RETRIES,
    ) -> None:
        self.station = station
        self.profile_label = profile_label
        self.spec = spec
        self._decoder = ModbusDecoder(spec)
        self.context = context
        self.device_id = spec.device_id if device_id is None else device_id
        self.function = spec.function
        self.seen: int | None = resume_cycle  # newest cycle handled (journalled or quarantined)
        self._resumed = resume_cycle is not None
        self.cal_seen: int | None = None
        self._torn: dict[int, int] = {}
        self._cal_torn = 0
        ring = spec.result
        self._counter_span = (int(ring.counter_address), int(ring.counter_registers))
        cal = spec.calibration
        self._cal_counter_span = (
            (int(cal.counter_address), int(cal.counter_registers)) if cal is not None else None
        )
        self._state_span = field_span(spec.state) if spec.state is not None else None
        self._header_plan = plan_reads(self._header_spans())  # the same reads every poll
        # Modbus TCP, and the counters and the whole ring fit in one read: each poll reads them
        # together, so a result costs one round trip instead of three (header, slot, header
        # again: what the second header read guards against cannot happen inside one read).
        # Not on a serial line, where the bigger idle read would cost time on the wire.
        whole = plan_reads([*self._header_spans(),
                            *((int(ring.slot_address(k)), int(ring.length))
                              for k in range(int(ring.depth)))])
        self._whole = whole[0] if spec.framer == "tcp" and len(whole) == 1 else None
        self._acked: int | None = None
        # the station's counter wraps (65535 -> 0, or at 2^32): cycles are handled here as
        # unwrapped integers and turned back into the station's numbers at its registers
        self._mod = 2 ** (16 * int(ring.counter_registers))
        self._first_contact = False  # reading what the ring held before we knew its counter
        self._pending: list[Item] = []  # gap records not yet handed out

    def _unwrap(self, counter: int) -> int | None:
        """The counter as an unwrapped cycle after ``seen``; None when it went back (reset)."""
        if self.seen is None:
            return counter
        ahead = (counter - self.seen) % self._mod
        return self.seen + ahead if ahead <= self._mod // 2 else None

    def pending_ack(self) -> tuple[int, list[int]] | None:
        """(address, registers) to acknowledge the newest handled cycle, if the profile asks.

        Without an ``acknowledge`` register in the profile this is always None: the gateway
        never writes to a station on its own initiative.
        """
        ack = self.spec.acknowledge
        if ack is None or self.seen is None or self.seen == self._acked or self.seen <= 0:
            return None
        self._acked = self.seen
        return int(ack.address), ack_registers(ack, self.seen % self._mod, self.spec.word_order)

    # -- the poll ---------------------------------------------------------------------------
    def drain_pending(self) -> list[Item]:
        """Gap records noted this poll, handed out even when a later read of the poll failed."""
        pending, self._pending = self._pending, []
        return pending

    async def poll(self, link: RegisterLink, *, take_results: bool = True) -> PollOutcome:
        """One consistent read; gap records made on the way travel with it (or, when a read
        fails, wait in ``drain_pending`` for the caller: a gap is never thrown away)."""
        out = await self._poll(link, take_results=take_results)
        out.items[:0] = self.drain_pending()
        return out

    async def _poll(self, link: RegisterLink, *, take_results: bool = True) -> PollOutcome:
        out = PollOutcome()
        whole: list[int] | None = None
        start = 0
        if self._whole is not None:
            start, count = self._whole
            whole = await self._read(link, start, count)
            header = dict(zip(range(start, start + count), whole, strict=True))
        else:
            header = await self._read_header(link)
        received_at = utcnow()
        if self._state_span is not None:
            out.state = self._decoder.decode_state(self._slice(header, self._state_span))
        c1 = self._decoder.decode_counter(self._slice(header, self._counter_span))
        out.counter = c1
        cc1 = (
            self._decoder.decode_calibration_counter(self._slice(header, self._cal_counter_span))
            if self._cal_counter_span is not None
            else 0
        )
        if not take_results:
            return out  # the journal is full: leave results in the station's ring

        ring = self.spec.result
        depth = int(ring.depth)
        u1 = self._unwrap(c1)
        cycles = self._cycles_to_read(c1, u1, depth, out, received_at)
        u1 = self._unwrap(c1)  # after a reset or first contact, relative to the new ``seen``
        blocks: dict[int, list[int]] = {}
        for cycle in cycles:
            address = int(ring.slot_address(cycle % self._mod))
            if whole is not None:
                blocks[cycle] = whole[address - start : address - start + int(ring.length)]
                continue
            try:
                blocks[cycle] = await self._read(link, address, int(ring.length))
            except ProtocolError as exc:
                # read what can be read: the slots before this one still count, the rest
                # wait for the next poll (a poll is not all-or-nothing)
                if not blocks:
                    raise
                log.debug("%s: slot of cycle %d not read (%s); %d read this poll",
                          self.station, cycle % self._mod, exc, len(blocks))
                out.unread += 1
                break
        cal_regs: list[int] | None = None
        cal = self.spec.calibration
        if cal is not None and self.cal_seen is None and cc1 == 0:
            self.cal_seen = 0  # no calibration yet; the one numbered 0 after a wrap is new
        if cal is not None and cc1 != self.cal_seen:
            cal_regs = await self._read(link, int(cal.address), int(cal.length))
        if not blocks and cal_regs is None:
            return out
        if whole is not None and cal_regs is None and u1 is not None:
            # counter and slots from one read: the counter cannot have moved in between
            self._accept_results(blocks, cycles, u1, depth, received_at, out)
            return out

        try:
            header2 = await self._read_header(link)
        except (ProtocolError, TransportError):
            if any(isinstance(i, GapEvent) for i in self._pending):
                return out  # the gap found before the failure stays on record
            raise
        c2 = self._decoder.decode_counter(self._slice(header2, self._counter_span))
        if blocks:
            u2 = self._unwrap(c2)
            if u1 is None or u2 is None or u2 < u1:
                log.debug("%s: counter moved back during the read (%d -> %d)", self.station,
                          c1, c2)
            else:
                self._accept_results(blocks, cycles, u2, depth, received_at, out)
        if cal_regs is not None and self._cal_counter_span is not None:
            cc2 = self._decoder.decode_calibration_counter(
                self._slice(header2, self._cal_counter_span)
            )
            self._accept_calibration(cal_regs, cc1, cc2, received_at, out)
        return out

    def _cycles_to_read(
        self, c1: int, u1: int | None, depth: int, out: PollOutcome, received_at: datetime
    ) -> list[int]:
        """Unwrapped cycles to read now. First contact reads what the ring still holds (the
        newest ``depth``; a counter of 0 means nothing yet, and arms gap detection); a counter
        that went back is a station reset (its ring is read again); one that passed its
        maximum has wrapped and goes on counting, the record numbered 0 included."""
        if self.seen is None:
            self.seen = max(0, c1 - depth)  # first contact: whatever the ring still holds
            if c1 <= 0:
                return []
            u1 = c1
            self._first_contact = True
        elif u1 is None:
            log.warning(
                "%s: result counter went back from %d to %d (station reset?); rereading its ring",
                self.station, self.seen % self._mod, c1,
            )
            self.seen = max(0, c1 - depth)
            self._torn.clear()
            u1 = c1
            self._first_contact = True
        if u1 <= self.seen and not self._resumed:
            return []
        first = max(self.seen + 1, u1 - depth + 1)
        if first > self.seen + 1:
            self._gap(self.seen + 1, first - 1, depth, received_at, out)
            self.seen = first - 1
        if self._resumed:
            # after a restart, read the whole ring once: a cycle torn at the moment the last
            # run stopped is read now, and repeats are ignored by the journal
            self._resumed = False
            self._first_contact = True  # slots never written since are skipped, not torn
            first = max(1, u1 - depth + 1)
        return list(range(first, u1 + 1))

    def _gap(self, lo: int, hi: int, depth: int, at: datetime, out: PollOutcome) -> None:
        out.missed += hi - lo + 1
        lo, hi = lo % self._mod, hi % self._mod  # as the station numbers them
        what = f"cycles {lo}..{hi}" if hi != lo else f"cycle {lo}"
        detail = (
            f"gap: {what} overwritten in the station's ring (depth {depth}) before they could "
            "be read"
        )
        log.warning("%s: %s", self.station, detail)
        state = out.state or StationState.ONLINE  # restate the current state, with the gap
        self._pending.append(
            StationStatus(station=self.station, at=at, state=state, detail=detail)
        )
        # the loss itself, on record: the journal keeps it in its gaps table
        self._pending.append(GapEvent(station=self.station, at=at, first=lo, last=hi, source="ring",
                                  detail=detail, line=self.context.line))

    def _accept_results(
        self,
        blocks: dict[int, list[int]],
        cycles: list[int],
        c2: int,
        depth: int,
        received_at: datetime,
        out: PollOutcome,
    ) -> None:
        first_contact, self._first_contact = self._first_contact, False
        advance = True
        for cycle in sorted(cycles):
            if cycle not in blocks:  # its read failed: read again next poll, from here on
                advance = False
                # still the first look at this slot: a never-written slot read next poll is
                # skipped, not taken for a torn one
                self._first_contact = first_contact
                continue
            if c2 >= cycle + depth:
                # its slot may have been rewritten while we read: the next poll reports the gap
                advance = False
                self._first_contact = first_contact
                continue
            regs = blocks[cycle]
            if first_contact and (not any(regs) or self._holds_other_cycle(regs, cycle)):
                # first contact, restart or reset: a slot never written (all zero) or still
                # holding an older cycle is nothing to take and nothing lost, not a torn block
                if advance:
                    self.seen = cycle
                continue
            decoded = self._decoder.decode_result(regs, cycle % self._mod, self.context,
                                              received_at)
            if isinstance(decoded, TestResult):
                out.items.append(decoded)
                out.accepted += 1
                self._torn.pop(cycle, None)
            elif isinstance(decoded, Rejected) and _is_torn(decoded):
                out.torn += 1
                tries = self._torn.get(cycle, 0) + 1
                self._torn[cycle] = tries
                if tries < _MAX_TORN_RETRIES:
                    log.debug("%s: torn read of cycle %d (%d)", self.station, cycle, tries)
                    advance = False
                    continue
                self._torn.pop(cycle, None)
                out.items.append(_persisted(decoded, tries))
            else:
                out.items.append(decoded)  # consistent but undecodable: bad data, quarantine
            if advance:
                self.seen = cycle

    def _holds_other_cycle(self, regs: list[int], cycle: int) -> bool:
        """Both guards agree on a cycle other than ``cycle``: a complete older block."""
        ring = self.spec.result
        width = int(ring.counter_registers)
        try:
            head, tail = (
                decode_registers(regs[at : at + width], ring.counter_type,
                                 word_order=ring.word_order, byte_order=ring.byte_order)
                for at in (int(ring.head_guard), int(ring.tail_guard))
            )
        except DecodeError:
            return False
        return head == tail and head != cycle % self._mod

    def _accept_calibration(
        self, regs: list[int], cc1: int, cc2: int, received_at: datetime, out: PollOutcome
    ) -> None:
        if cc2 != cc1:
            log.debug("%s: calibration counter moved during the read", self.station)
            return
        decoded = self._decoder.decode_calibration(regs, cc1, self.context, received_at)
        if isinstance(decoded, CalibrationEvent):
            out.items.append(decoded)
        elif isinstance(decoded, Rejected) and _is_torn(decoded):
            out.torn += 1
            self._cal_torn += 1
            if self._cal_torn < _MAX_TORN_RETRIES:
                return
            out.items.append(_persisted(decoded, self._cal_torn))
        else:
            out.items.append(decoded)
        self._cal_torn = 0
        self.cal_seen = cc1

    # -- register access ----------------------------------------------------------------------
    def _header_spans(self) -> list[tuple[int, int]]:
        spans = [self._counter_span]
        if self._cal_counter_span is not None:
            spans.append(self._cal_counter_span)
        if self._state_span is not None:
            spans.append(self._state_span)
        return spans

    async def _read_header(self, link: RegisterLink) -> dict[int, int]:
        regs: dict[int, int] = {}
        for address, count in self._header_plan:
            values = await self._read(link, address, count)
            regs.update(zip(range(address, address + count), values, strict=True))
        return regs

    @staticmethod
    def _slice(regs: dict[int, int], span: tuple[int, int]) -> list[int]:
        address, count = span
        return [regs[a] for a in range(address, address + count)]

    async def _read(self, link: RegisterLink, address: int, count: int) -> list[int]:
        values = await link.read(self.function, address, count, self.device_id)
        if len(values) != count:
            raise ProtocolError(
                f"{self.station}: asked for {count} registers at {address}, got {len(values)}"
            )
        return values


def _is_torn(rejected: Rejected) -> bool:
    return rejected.reason.lower().startswith("torn")


def _persisted(rejected: Rejected, tries: int) -> Rejected:
    return Rejected(
        station=rejected.station,
        profile=rejected.profile,
        raw=rejected.raw,
        reason=f"{rejected.reason} (still inconsistent after {tries} reads)",
        received_at=rejected.received_at,
        line_no=rejected.line_no,
    )


class PymodbusLink:
    """A pymodbus async client (TCP, or RTU on a serial port) with one lock for its bus.

    pymodbus's own reconnect is switched off (``reconnect_delay=0``): the bus loop reconnects
    with our backoff, so there is one retry policy to reason about.
    """

    def __init__(
        self,
        endpoint: str,
        *,
        framer: str = "tcp",
        timeout: float = 1.0,
        baudrate: int = 19200,
        bytesize: int = 8,
        parity: str = "N",
        stopbits: int = 1,
        name: str = "",
    ) -> None:
        self.endpoint = endpoint
        self.framer = framer
        self.timeout = timeout
        self.baudrate, self.bytesize, self.parity, self.stopbits = (
            baudrate, bytesize, parity, stopbits
        )
        self.name = name or endpoint
        self.lock = asyncio.Lock()  # a client is not task-safe; an RS-485 bus is one wire
        self._client: Any = None

    def _make_client(self) -> Any:
        from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
        from pymodbus.framer import FramerType

        framer = FramerType.RTU if self.framer == "rtu" else FramerType.SOCKET
        common: dict[str, Any] = {"timeout": self.timeout, "retries": 0, "reconnect_delay": 0}
        if self.endpoint.startswith("tcp://"):
            host, port = split_host_port(self.endpoint[len("tcp://") :])
            return AsyncModbusTcpClient(host, port=port, framer=framer, **common)
        return AsyncModbusSerialClient(
            self.endpoint,
            framer=FramerType.RTU,
            baudrate=self.baudrate,
            bytesize=self.bytesize,
            parity=self.parity,
            stopbits=self.stopbits,
            **common,
        )

    @property
    def connected(self) -> bool:
        return self._client is not None and bool(self._client.connected)

    async def connect(self) -> None:
        self.close()
        client = self._make_client()
        try:
            ok = await within(client.connect(), self.timeout + 1.0)
        except (TimeoutError, OSError) as exc:
            client.close()
            raise LinkLost(f"{self.name}: cannot connect: {exc or 'timeout'}") from exc
        if not ok:
            client.close()
            raise LinkLost(f"{self.name}: cannot connect to {self.endpoint}")
        self._client = client

    def close(self) -> None:
        if self._client is not None:
            with contextlib.suppress(OSError):
                self._client.close()
            self._client = None

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        from pymodbus.exceptions import ConnectionException, ModbusException, ModbusIOException

        client = self._client
        if client is None:
            raise LinkLost(f"{self.name}: not connected")
        if function == 3:  # holding registers: nearly every poll
            call = client.read_holding_registers
        else:
            call = {
                1: client.read_coils,
                2: client.read_discrete_inputs,
                4: client.read_input_registers,
            }.get(function, client.read_holding_registers)
        async with self.lock:
            try:
                # inline, not ``within``: one coroutine fewer on every read of every poll
                async with asyncio.timeout(self.timeout + 0.5):
                    reply = await call(address, count=count, device_id=device_id)
            except ConnectionException as exc:
                raise LinkLost(f"{self._what(function, address, count, device_id)}: "
                               f"connection lost: {exc}") from exc
            except (ModbusIOException, TimeoutError) as exc:
                raise NoAnswer(f"{self._what(function, address, count, device_id)}: "
                               f"no answer within {self.timeout:g} s") from exc
            except ModbusException as exc:
                raise ProtocolError(
                    f"{self._what(function, address, count, device_id)}: {exc}") from exc
            except OSError as exc:
                raise LinkLost(f"{self._what(function, address, count, device_id)}: {exc}"
                               ) from exc
        if reply.isError():
            code = int(getattr(reply, "exception_code", 0) or 0)
            raise ExceptionReply(code, self._what(function, address, count, device_id))
        if function in (1, 2):
            return [int(b) for b in reply.bits[:count]]
        return list(reply.registers)

    def _what(self, function: int, address: int, count: int, device_id: int) -> str:
        """The request, for an error message (made only when one is raised)."""
        return f"{self.name} device {device_id} fc{function} {address}+{count}"

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        """Function 6 for one register (what most stations expect), 16 for more."""
        if self._client is None:
            raise LinkLost(f"{self.name}: not connected")
        if len(values) == 1:
            call = self._client.write_register(address, values[0], device_id=device_id)
        else:
            call = self._client.write_registers(address, values, device_id=device_id)
        await self._write(call, f"{self.name} device {device_id} write {address}+{len(values)}")

    async def write_coil(self, address: int, value: bool, device_id: int) -> None:
        """Function 5: set or clear one coil (a "new result" flag, an acknowledge bit)."""
        if self._client is None:
            raise LinkLost(f"{self.name}: not connected")
        call = self._client.write_coil(address, value, device_id=device_id)
        await self._write(call, f"{self.name} device {device_id} coil {address}")

    async def _write(self, call: Any, what: str) -> None:
        from pymodbus.exceptions import ModbusException

        async with self.lock:
            try:
                reply = await within(call, self.timeout + 0.5)
            except (ModbusException, TimeoutError) as exc:
                raise NoAnswer(f"{what}: {exc or 'timeout'}") from exc
        if reply.isError():
            raise ExceptionReply(int(getattr(reply, "exception_code", 0) or 0), what)


async def run_modbus_bus(
    targets: Sequence[StationTarget],
    outbox: Outbox,
    pacing: Pacing,
    link: Any = None,
    *,
    phase: float = 0.0,
) -> None:
    """Poll every station on one bus (a TCP endpoint or a serial line) in turn, for ever.

    ``phase`` (0..1) delays the first poll by that fraction of the poll interval: a gateway
    with many buses spreads them over the interval, so no instant carries every request
    (which would queue results behind each other in the gateway and on shared networks).
    """
    first = targets[0]
    spec = first.profile.modbus
    if spec is None:
        raise TransportError(f"{first.station}: profile {first.profile.label} has no modbus spec")
    opts = first.options
    if link is None:
        link = PymodbusLink(
            first.endpoint,
            framer=spec.framer,
            timeout=first.timeout_s,
            baudrate=opts.get("baudrate", getattr(spec, "baudrate", 19200)),
            bytesize=opts.get("bytesize", getattr(spec, "bytesize", 8)),
            parity=opts.get("parity", getattr(spec, "parity", "N")),
            stopbits=opts.get("stopbits", getattr(spec, "stopbits", 1)),
            name=first.endpoint,
        )
    readers: dict[str, RingReader | LatestReader] = {}
    curves: dict[str, CurveReader] = {}
    for t in targets:
        tspec = t.profile.modbus
        if t.context.traces and tspec is not None and tspec.trace is not None:
            curves[t.station] = CurveReader(tspec, t.context,
                                            t.options.get("device_id", tspec.device_id))
        t.health.offline_after = pacing.offline_after
        mspec = t.profile.modbus
        assert mspec is not None
        if mspec.latest is not None:
            ring = mspec.result
            block = BlockSpec(ring.counter_address, ring.counter_type, ring.base, ring.length,
                              ring.head_guard, ring.tail_guard, ring.fields, ring.word_order,
                              ring.byte_order)
            readers[t.station] = LatestReader(
                t.station, mspec, block, mspec.latest, t.context,
                resume_cycle=t.resume_cycle, device_id=t.options.get("device_id"),
            )
            continue
        readers[t.station] = RingReader(
            t.station,
            t.profile.label,
            mspec,
            t.context,
            resume_cycle=t.resume_cycle,
            device_id=t.options.get("device_id"),
        )
    loop = asyncio.get_running_loop()
    start = loop.time() + (phase % 1.0) * min(t.poll_interval_s for t in targets)
    due = {t.station: start for t in targets}
    backoff = pacing.backoff()
    try:
        while True:
            if not link.connected:
                try:
                    await link.connect()
                    backoff.reset()
                except TransportError as exc:
                    for t in targets:
                        await _emit(outbox, t.health.failed(str(exc)))
                    await sleep_for(backoff.next())
                    continue
            for t in targets:
                if loop.time() < due[t.station]:
                    continue
                due[t.station] = loop.time() + t.poll_interval_s
                await _poll_one(t, readers[t.station], link, outbox, curves.get(t.station))
                if not link.connected:
                    break
            if link.connected:
                await sleep_for(min(due.values()) - loop.time())
    finally:
        link.close()


async def _poll_one(
    target: StationTarget, reader: RingReader | LatestReader, link: Any, outbox: Outbox,
    curves: CurveReader | None = None,
) -> None:
    health = target.health
    loop = asyncio.get_running_loop()
    started = loop.time()
    try:
        outcome = await reader.poll(link, take_results=outbox.accepting)
    except ExceptionReply as exc:
        await _flush(outbox, reader)
        health.count(f"exception_{exc.code:02d}")
        health.error()
        log.debug("%s: %s; retrying next poll", target.station, exc)
        return  # the station is there and will answer again; nothing to report
    except NoAnswer as exc:
        await _flush(outbox, reader)
        health.count("no_answer")
        # a late answer would land on the next request: start that one on a fresh link
        link.close()
        await _emit(outbox, health.failed(str(exc)))
        return
    except LinkLost as exc:
        await _flush(outbox, reader)
        link.close()
        await _emit(outbox, health.failed(str(exc)))
        return
    except ProtocolError as exc:
        await _flush(outbox, reader)
        health.count("protocol_error")
        link.close()
        await _emit(outbox, health.failed(str(exc), state=StationState.FAULT))
        return
    health.polled(loop.time() - started)  # the whole consistent read: header, slots, header
    items: list[Item] = []
    status = health.succeeded()
    if status is not None:
        items.append(status)
    if outcome.state is not None:
        observed = health.observed(outcome.state)
        if observed is not None:
            items.append(observed)
    if outcome.torn:
        health.count("torn", outcome.torn)
    if outcome.missed:
        health.count("missed", outcome.missed)
    if outcome.unread:
        health.count("slot_unread", outcome.unread)
    items.extend(outcome.items)
    if curves is not None and outbox.accepting:
        try:
            items.extend(await curves.poll(link, outcome.items))
        except (ExceptionReply, NoAnswer, LinkLost, ProtocolError) as exc:
            # the curve counter only moves after a whole read: the next poll tries again
            log.debug("%s: pressure curve not read this poll: %s", target.station, exc)
            if not isinstance(exc, ExceptionReply):
                link.close()
    if items:
        await outbox.put(items)
    ack = reader.pending_ack()
    if ack is not None:
        try:
            await link.write(ack[0], ack[1], reader.device_id)
        except (ExceptionReply, NoAnswer) as exc:
            log.warning("%s: acknowledge failed: %s", target.station, exc)


async def _flush(outbox: Outbox, reader: RingReader | LatestReader) -> None:
    """Hand out the gap records a failed poll noted before it failed."""
    pending = reader.drain_pending()
    if pending:
        await outbox.put(pending)


async def _emit(outbox: Outbox, status: Item | None) -> None:
    if status is not None:
        await outbox.put([status])
