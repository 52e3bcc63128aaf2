"""lf-delim: one line per record streamed to every TCP client, as a serial device server does."""

from __future__ import annotations

import asyncio
import contextlib
import logging
import random
from zoneinfo import ZoneInfo

from sim.formats import delim_calibration, delim_result
from sim.servers.base import Endpoint, TruthSink, garbage_bytes, truncate
from sim.station import Activity, SimResult

__all__ = ["DelimServer"]

log = logging.getLogger(__name__)
_EOL = b"\r\n"
_WRITE_TIMEOUT_S = 2.0


class DelimServer:
    """Streams ``R;``/``C;`` lines; lines sent while nobody listens are lost, as on a real line."""

    def __init__(
        self, station: str, port: int, tz: ZoneInfo, truth: TruthSink, rng: random.Random
    ) -> None:
        self.station = station
        self.port = port
        self.tz = tz
        self.truth = truth
        self.rng = rng
        self.endpoint = Endpoint(station, "lf-delim", "tcp", "127.0.0.1", port)
        self._server: asyncio.Server | None = None
        self._clients: set[asyncio.StreamWriter] = set()
        self._closed = asyncio.Event()

    async def start(self) -> None:
        self._server = await asyncio.start_server(self._client, "127.0.0.1", self.port)
        self.port = self._server.sockets[0].getsockname()[1]
        self.endpoint = Endpoint(self.station, "lf-delim", "tcp", "127.0.0.1", self.port)

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        self._clients.add(writer)
        try:
            while await reader.read(1024):
                pass  # the station never reads; whatever the peer sends is ignored
        except (ConnectionError, OSError):
            pass
        finally:
            self._clients.discard(writer)
            writer.close()

    async def _send(self, data: bytes) -> None:
        for writer in list(self._clients):
            try:
                writer.write(data)
                await asyncio.wait_for(writer.drain(), _WRITE_TIMEOUT_S)
            except (ConnectionError, OSError, TimeoutError):
                self._clients.discard(writer)
                writer.close()

    async def publish(self, activity: Activity) -> None:
        record = activity.record
        encoded = (
            delim_result(record, self.tz)
            if isinstance(record, SimResult)
            else delim_calibration(record, self.tz)
        )
        line: bytes = encoded.payload
        listeners = len(self._clients)
        if activity.garbage:
            junk = garbage_bytes(self.rng)
            self.truth.garbage(self.station, junk, listeners=listeners)
            await self._send(junk + _EOL)
        fault = None
        if activity.truncated:
            cut = truncate(line, self.rng)
            self.truth.garbage(self.station, cut, listeners=listeners, truncated=True)
            await self._send(cut + _EOL)
            fault = "truncated"
        else:
            await self._send(line + _EOL)
            if activity.duplicate:
                await self._send(line + _EOL)
                fault = "duplicated"
        self.truth.record(
            activity,
            encoded.reported,
            encoded.resolution,
            fault=fault,
            listeners=listeners,
            raw=line.decode("ascii"),
        )

    async def set_state(self, state: str) -> None:
        return None  # a streaming station has no status to poll

    async def set_link(self, up: bool) -> None:
        if up and self._server is None:
            self._server = await asyncio.start_server(self._client, "127.0.0.1", self.port)
        elif not up and self._server is not None:
            await self._shutdown()

    async def _shutdown(self) -> None:
        server, self._server = self._server, None
        if server is not None:
            server.close()
        for writer in list(self._clients):
            writer.close()
        self._clients.clear()
        if server is not None:
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(server.wait_closed(), 2.0)

    async def serve(self) -> None:
        await self._closed.wait()

    async def close(self) -> None:
        await self._shutdown()
        self._closed.set()
