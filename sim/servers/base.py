"""What every protocol server offers the station runner."""

from __future__ import annotations

import asyncio
import contextlib
import random
from dataclasses import dataclass
from typing import Any, Protocol

from sim.station import Activity

__all__ = ["Endpoint", "StationServer", "TcpPort", "TruthSink", "garbage_bytes", "truncate"]


@dataclass(frozen=True, slots=True)
class Endpoint:
    """Where a gateway finds a station: ``tcp`` host:port or a ``tty`` path (a symlink)."""

    station: str
    type: str
    transport: str  # "tcp" or "tty"
    host: str | None = None
    port: int | None = None
    path: str | None = None

    def __str__(self) -> str:
        return f"{self.host}:{self.port}" if self.transport == "tcp" else str(self.path)


class TruthSink(Protocol):
    def record(
        self,
        activity: Activity,
        reported: dict[str, Any],
        resolution: dict[str, float],
        **extra: Any,
    ) -> None: ...

    def garbage(self, station: str, raw: bytes, **extra: Any) -> None: ...


class StationServer(Protocol):
    endpoint: Endpoint

    async def start(self) -> None: ...

    async def serve(self) -> None:
        """Long-running work (answering queries); returns when closed."""

    async def publish(self, activity: Activity) -> None: ...

    async def set_state(self, state: str) -> None: ...

    async def set_link(self, up: bool) -> None: ...

    async def close(self) -> None: ...


_NOISE = bytes(range(0x20, 0x7F)) + bytes(range(0x80, 0x100))


def garbage_bytes(rng: random.Random) -> bytes:
    """Line noise: printable junk with some high bytes, never a line end."""
    return bytes(rng.choice(_NOISE) for _ in range(rng.randint(4, 40)))


def truncate(line: bytes, rng: random.Random) -> bytes:
    """A line cut short, as when a cable glitch swallows its tail."""
    return line[: rng.randint(1, max(1, len(line) - 1))]


class TcpPort:
    """A serial device server's TCP port on 127.0.0.1: clients come and go, a dropped link
    closes the port and cuts every client, the same port opens again. Subclasses handle a
    client in ``_client`` (and add it to ``_clients`` while it is connected)."""

    port: int

    def _port_init(self, port: int) -> None:
        self.port = port
        self._server: asyncio.Server | None = None
        self._clients: set[asyncio.StreamWriter] = set()
        self._closed = asyncio.Event()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        raise NotImplementedError

    async def _open(self) -> None:
        self._server = await asyncio.start_server(self._client, "127.0.0.1", self.port)
        self.port = self._server.sockets[0].getsockname()[1]

    async def set_link(self, up: bool) -> None:
        if up and self._server is None:
            await self._open()
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
        if not self._closed.is_set():
            await self._shutdown()
            self._closed.set()
