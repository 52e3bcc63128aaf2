"""lf-ticket: an RS-485 line of addressed stations behind one serial device server (TCP).

Every station on the line keeps its latest test ticket and its latest calibration ticket. A
query names the station by its address: ``ENQ <address, two digits> T CR`` for the test
ticket, ``... K CR`` for the calibration ticket. Only the station addressed answers, with its
ticket framed by STX/ETX and an XOR block check, or with a single NAK line when it has none
yet; a query for an address nobody has gets no answer at all, as on a real multi-drop line.
Line noise (the ``garbage`` fault) goes out just before an answer, and a ticket can go out
once with one character changed in transit (the ``truncated`` fault, here: corrupted), which
the block check must catch; the next query gets it right.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import random
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from sim.formats import Encoded
from sim.formats_serial import NAK, ticket_calibration, ticket_result
from sim.servers.base import Endpoint, TcpPort, TruthSink, garbage_bytes
from sim.station import Activity, SimResult

__all__ = ["TicketLine", "TicketStation"]

log = logging.getLogger(__name__)
_MAX_QUERY = 64
_ENQ = 0x05


@dataclass
class _Drop:
    station: str
    address: int
    test: bytes | None = None
    calibration: bytes | None = None
    noise: bytes | None = None
    corrupt_next: bool = False


class TicketLine(TcpPort):
    """The shared line: one TCP port, several addressed stations."""

    def __init__(self, name: str, port: int, truth: TruthSink, rng: random.Random) -> None:
        self.name = name
        self.port = port
        self.truth = truth
        self.rng = rng
        self.drops: dict[int, _Drop] = {}
        self._port_init(port)
        self._started = False
        self.queries = 0

    def attach(self, station: str, address: int) -> None:
        if address in self.drops:
            raise ValueError(f"address {address} is taken on line {self.name}")
        self.drops[address] = _Drop(station, address)

    async def start(self) -> None:
        if self._started:
            return
        self._started = True
        await self._open()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        self._clients.add(writer)
        try:
            while True:
                line = await reader.readuntil(b"\r")
                if len(line) > _MAX_QUERY:
                    continue
                await self._answer(line.strip(), writer)
        except (asyncio.IncompleteReadError, asyncio.LimitOverrunError, ConnectionError,
                OSError):
            pass
        finally:
            self._clients.discard(writer)
            writer.close()

    async def _answer(self, query: bytes, writer: asyncio.StreamWriter) -> None:
        self.queries += 1
        if len(query) != 4 or query[0] != _ENQ or not query[1:3].isdigit():
            return  # not a query of this protocol: every station stays silent
        drop = self.drops.get(int(query[1:3]))
        if drop is None:
            return  # nobody has this address
        kind = chr(query[3])
        ticket = drop.test if kind == "T" else drop.calibration if kind == "K" else None
        if kind not in ("T", "K"):
            return
        out = b""
        if drop.noise is not None and kind == "T":
            self.truth.garbage(drop.station, drop.noise)
            out += drop.noise + b"\r\n"
            drop.noise = None
        if ticket is None:
            out += NAK.encode("ascii") + b"\r\n"
        elif drop.corrupt_next and kind == "T":
            drop.corrupt_next = False
            bad = _corrupt(ticket, self.rng)
            self.truth.garbage(drop.station, bad.rstrip(b"\r\n"), truncated=True)
            out += bad
        else:
            out += ticket
        writer.write(out)
        with contextlib.suppress(ConnectionError, OSError, TimeoutError):
            await asyncio.wait_for(writer.drain(), 2.0)

    def publish(self, address: int, activity: Activity, tz: ZoneInfo) -> None:
        drop = self.drops[address]
        record = activity.record
        encoded: Encoded
        if isinstance(record, SimResult):
            encoded = ticket_result(record, tz, address)
            drop.test = encoded.payload
            if activity.garbage:
                drop.noise = garbage_bytes(self.rng)
            drop.corrupt_next = activity.truncated
        else:
            encoded = ticket_calibration(record, tz, address)
            drop.calibration = encoded.payload
        self.truth.record(activity, encoded.reported, encoded.resolution, fault=None,
                          raw=encoded.payload.decode("ascii"), address=address)


def _corrupt(ticket: bytes, rng: random.Random) -> bytes:
    """One character of the ticket body changed (never STX, ETX, the check or a line end)."""
    body = bytearray(ticket)
    spots = [i for i, b in enumerate(body[1:-5], start=1) if b not in (0x02, 0x03, 0x0D, 0x0A)]
    i = rng.choice(spots)
    body[i] = body[i] + 1 if body[i] < 0x7E else body[i] - 1
    return bytes(body)


class TicketStation:
    """One station on a ticket line, as the plant runner sees a station server."""

    def __init__(self, station: str, line: TicketLine, address: int, tz: ZoneInfo) -> None:
        self.station = station
        self.line = line
        self.address = address
        self.tz = tz
        line.attach(station, address)
        self.endpoint = Endpoint(station, "lf-ticket", "tcp", "127.0.0.1", line.port)

    async def start(self) -> None:
        await self.line.start()
        self.endpoint = Endpoint(self.station, "lf-ticket", "tcp", "127.0.0.1", self.line.port)

    async def serve(self) -> None:
        await self.line.serve()

    async def publish(self, activity: Activity) -> None:
        self.line.publish(self.address, activity, self.tz)

    async def set_state(self, state: str) -> None:
        return None

    async def set_link(self, up: bool) -> None:
        await self.line.set_link(up)

    async def close(self) -> None:
        await self.line.close()
