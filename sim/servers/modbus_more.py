"""lf-mbinput, lf-mblast and lf-mbnoclk: Modbus TCP stations laid out the way other makers do.

Each serves the four Modbus tables (coils, discrete inputs, holding and input registers) from a
pymodbus ``SimDevice`` and writes its own image as it works. A peer may write only where the
type's handshake says (lf-mbinput: the acknowledge register; lf-mblast: the new-result coil);
any other write is refused with exception 01, as the first types do.

* lf-mbinput keeps a four-slot ring in input registers with a 16-bit counter that wraps
  65535 -> 0, and stores the cycle the gateway acknowledges (``acknowledged``).
* lf-mblast keeps one last-result block and raises coil 0 when it holds a new result; it never
  overwrites a result the gateway has not taken: later results wait in the station's queue
  until the gateway clears the coil (``queued`` of them are waiting).
* lf-mbnoclk overwrites its block with every result and sets discrete inputs 0..2; a reader
  polling faster than the station cycles sees every result.
"""

from __future__ import annotations

import asyncio
import collections
import logging
import random
from zoneinfo import ZoneInfo

from pymodbus.constants import ExcCodes
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from sim.formats import Encoded
from sim.formats_registers import (
    MBINPUT_ACK,
    MBINPUT_BASE,
    MBINPUT_SLOT,
    mbinput_result,
    mbinput_slot_address,
    mblast_result,
    mbnoclk_bits,
    mbnoclk_result,
)
from sim.scenario import Faults
from sim.servers.base import Endpoint, TruthSink
from sim.servers.modbus import TcpLifecycle, read_faults
from sim.station import Activity, SimResult

__all__ = ["MbInputServer", "MbLastServer", "MbNoClockServer"]

log = logging.getLogger(__name__)
_SIZE = 200  # registers (and bit words) in each table
_COILS, _INPUTS, _HOLDING, _INPUT_REGS = 1, 2, 3, 4


class _TcpTables(TcpLifecycle):
    """A Modbus TCP station with all four tables; subclasses decide what to publish."""

    kind = ""

    def __init__(self, station: str, port: int, device_id: int, faults: Faults,
                 truth: TruthSink, rng: random.Random, tz: ZoneInfo) -> None:
        self.station = station
        self.port = port
        self.device_id = device_id
        self.faults = faults
        self.truth = truth
        self.rng = rng
        self.tz = tz
        self.endpoint = Endpoint(station, self.kind, "tcp", "127.0.0.1", port)
        # the station's own image, restored into a server started again after a dropped link
        self.image: dict[int, list[int]] = {_HOLDING: [0] * _SIZE, _INPUT_REGS: [0] * _SIZE}
        self.bits: dict[int, list[bool]] = {_COILS: [False] * 16, _INPUTS: [False] * 16}
        self._server: ModbusTcpServer | None = None
        self._own_write = False
        self._closed = asyncio.Event()
        self._tasks: set[asyncio.Task[None]] = set()

    # -- what a peer may write ------------------------------------------------------------------
    def writable(self, function_code: int, address: int, count: int) -> bool:
        return False

    def written(self, function_code: int, address: int, values: list[int] | list[bool]) -> None:
        """A peer's permitted write has been applied (called once the server stored it)."""

    async def _action(self, function_code: int, start_address: int, address: int, count: int,
                      registers: list[int], set_values: list[int] | list[bool] | None,
                      ) -> ExcCodes | None:
        if set_values is not None:
            if self._own_write:
                return None
            if not self.writable(function_code, address, len(set_values)):
                return ExcCodes.ILLEGAL_FUNCTION  # a reader writes only where the station says
            values = list(set_values)
            loop = asyncio.get_running_loop()
            # the server stores the values right after this hook returns
            loop.call_soon(self.written, function_code, address, values)
            return None
        return await read_faults(self.faults, self.rng)

    def _device(self) -> SimDevice:
        def regs() -> list[SimData]:
            return [SimData(0, count=_SIZE, values=0, datatype=DataType.REGISTERS)]

        def bits() -> list[SimData]:
            return [SimData(0, count=1, values=False, datatype=DataType.BITS)]

        return SimDevice(id=self.device_id, simdata=(bits(), bits(), regs(), regs()),
                         action=self._action)

    # -- the station writing its own tables ------------------------------------------------------
    async def write_regs(self, table: int, address: int, values: list[int]) -> None:
        self.image[table][address:address + len(values)] = values
        await self._store(table, address, values)

    async def write_bits(self, table: int, address: int, values: list[bool]) -> None:
        self.bits[table][address:address + len(values)] = values
        await self._store(table, address, values)

    async def _store(self, table: int, address: int, values: list[int] | list[bool]) -> None:
        if self._server is None:
            return
        self._own_write = True
        try:
            await self._server.async_setValues(self.device_id, table, address, values)
        finally:
            self._own_write = False

    async def _restore(self) -> None:
        for table, image in self.image.items():
            for start in range(0, len(image), 100):
                await self._store(table, start, image[start:start + 100])
        for table, bits in self.bits.items():
            await self._store(table, 0, bits)

    # -- lifecycle (TcpLifecycle: start, set_link) ---------------------------------------------
    async def set_state(self, state: str) -> None:
        return None  # these types publish no state register

    async def serve(self) -> None:
        await self._closed.wait()

    async def close(self) -> None:
        for task in list(self._tasks):
            task.cancel()
        await self._stop()

    def _record(self, activity: Activity, encoded: Encoded, address: int, **extra: object) -> None:
        self.truth.record(activity, encoded.reported, encoded.resolution, fault=None,
                          address=address, registers=encoded.payload, **extra)

    def _calibration_unread(self, activity: Activity) -> None:
        # these types keep no calibration where the profiles read: the truth says so, and a
        # correct gateway has none of them
        self.truth.record(activity, {}, {}, fault=None, unread=True)


class MbInputServer(_TcpTables):
    """lf-mbinput: ring in input registers, u16 counter at IR 0, acknowledge in HR 100."""

    kind = "lf-mbinput"

    def __init__(self, *args: object, **kwargs: object) -> None:
        super().__init__(*args, **kwargs)  # type: ignore[arg-type]
        self.acknowledged: int | None = None

    def writable(self, function_code: int, address: int, count: int) -> bool:
        return function_code in (6, 16) and address == MBINPUT_ACK and count == 1

    def written(self, function_code: int, address: int, values: list[int] | list[bool]) -> None:
        self.image[_HOLDING][address] = int(values[0])
        self.acknowledged = int(values[0])

    async def publish(self, activity: Activity) -> None:
        record = activity.record
        if not isinstance(record, SimResult):
            self._calibration_unread(activity)
            return
        encoded = mbinput_result(record, self.tz, heater=self.rng.random() < 0.5,
                                 door=self.rng.random() < 0.1)
        address = mbinput_slot_address(record.cycle)
        regs: list[int] = encoded.payload
        if activity.reset:
            # power-cycled: the ring lived in RAM; the counter starts again at this record
            await self.write_regs(_INPUT_REGS, 0, [0] * (MBINPUT_BASE + 4 * MBINPUT_SLOT))
        if activity.torn:
            # a careless firmware: the counter first, then the slot in two halves (the guards
            # at both ends of the slot disagree in between)
            await self.write_regs(_INPUT_REGS, 0, [record.cycle & 0xFFFF])
            half = len(regs) // 2
            await self.write_regs(_INPUT_REGS, address, regs[:half])
            await asyncio.sleep(self.faults.torn_gap_s)
            await self.write_regs(_INPUT_REGS, address + half, regs[half:])
        else:
            await self.write_regs(_INPUT_REGS, address, regs)
            await self.write_regs(_INPUT_REGS, 0, [record.cycle & 0xFFFF])
        self.truth.record(activity, encoded.reported, encoded.resolution,
                          fault="torn" if activity.torn else None, address=address,
                          registers=regs)


class MbLastServer(_TcpTables):
    """lf-mblast: one block at HR 0..15 and coil 0 "new result"; results wait for the coil."""

    kind = "lf-mblast"

    def __init__(self, *args: object, **kwargs: object) -> None:
        super().__init__(*args, **kwargs)  # type: ignore[arg-type]
        self._queue: collections.deque[tuple[Activity, Encoded]] = collections.deque()
        self._lock = asyncio.Lock()

    @property
    def queued(self) -> int:
        return len(self._queue)

    def writable(self, function_code: int, address: int, count: int) -> bool:
        return function_code in (5, 15) and address == 0 and count == 1

    def written(self, function_code: int, address: int, values: list[int] | list[bool]) -> None:
        self.bits[_COILS][0] = bool(values[0])
        if not values[0]:
            task = asyncio.get_running_loop().create_task(self._next())
            self._tasks.add(task)
            task.add_done_callback(self._tasks.discard)

    async def publish(self, activity: Activity) -> None:
        record = activity.record
        if not isinstance(record, SimResult):
            self._calibration_unread(activity)
            return
        self._queue.append((activity, mblast_result(record, self.tz, self.rng.getrandbits(8))))
        await self._next()

    async def _next(self) -> None:
        """Put the oldest waiting result in the block, if the gateway has taken the last."""
        async with self._lock:
            if not self._queue:
                return
            if self.bits[_COILS][0]:  # the image follows the gateway's writes (``written``)
                return  # not taken yet: the result waits in the station
            activity, encoded = self._queue.popleft()
            await self.write_regs(_HOLDING, 0, encoded.payload)
            await self.write_bits(_COILS, 0, [True])
            self._record(activity, encoded, 0)


class MbNoClockServer(_TcpTables):
    """lf-mbnoclk: block at HR 0..6 overwritten by every result, verdict in DI 0..2."""

    kind = "lf-mbnoclk"

    async def publish(self, activity: Activity) -> None:
        record = activity.record
        if not isinstance(record, SimResult):
            self._calibration_unread(activity)
            return
        encoded = mbnoclk_result(record)
        await self.write_regs(_HOLDING, 0, encoded.payload)
        await self.write_bits(_INPUTS, 0, mbnoclk_bits(record))
        self._record(activity, encoded, 0)
