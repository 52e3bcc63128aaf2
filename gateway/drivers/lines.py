"""Byte streams to lines: a pure splitter and a small link over asyncio streams.

The splitter never trusts the wire: a line longer than ``max_line`` is cut, reported as
overlong and the rest of it skipped up to the next terminator, so a babbling station cannot make
the gateway buffer without bound.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections import deque
from dataclasses import dataclass

from gateway.aio import within
from gateway.errors import TransportError

__all__ = ["LineLink", "LineSplitter", "RawLine", "open_line_link"]

log = logging.getLogger(__name__)

_CHUNK = 4096


@dataclass(frozen=True, slots=True)
class RawLine:
    """One line off the wire, terminator removed; ``overlong`` when it was cut at max_line."""

    data: bytes
    overlong: bool = False


class LineSplitter:
    """Split a byte stream on a terminator; its last byte alone (``\\n``) also ends a line."""

    def __init__(self, terminator: bytes = b"\r\n", max_line: int = 4096) -> None:
        if not terminator:
            raise ValueError("terminator must not be empty")
        if max_line < 1:
            raise ValueError(f"max_line must be >= 1, got {max_line}")
        self._end = terminator[-1:]
        self._strip = terminator[:-1]
        self.max_line = max_line
        self._buf = bytearray()
        self._skipping = False

    def feed(self, data: bytes) -> list[RawLine]:
        out: list[RawLine] = []
        self._buf += data
        while True:
            cut = self._buf.find(self._end)
            if cut < 0:
                break
            line = bytes(self._buf[:cut])
            del self._buf[: cut + 1]
            if self._skipping:
                self._skipping = False  # the tail of an overlong line ends here
                continue
            if self._strip and line.endswith(self._strip):
                line = line[: -len(self._strip)]
            if len(line) > self.max_line:
                out.append(RawLine(line[: self.max_line], overlong=True))
            else:
                out.append(RawLine(line))
        if not self._skipping and len(self._buf) > self.max_line:
            out.append(RawLine(bytes(self._buf[: self.max_line]), overlong=True))
            self._skipping = True
        if self._skipping:
            self._buf.clear()
        return out

    @property
    def pending(self) -> bytes:
        """Bytes of an unterminated line (an incomplete answer's tail)."""
        return bytes(self._buf)

    def reset(self) -> None:
        self._buf.clear()
        self._skipping = False


class LineLink:
    """Lines over an asyncio reader/writer pair, every wait bounded by a timeout."""

    def __init__(
        self,
        reader: asyncio.StreamReader,
        writer: asyncio.StreamWriter,
        splitter: LineSplitter,
        name: str = "",
    ) -> None:
        self._reader = reader
        self._writer = writer
        self._splitter = splitter
        self._lines: deque[RawLine] = deque()
        self.name = name

    async def read_line(self, timeout: float) -> RawLine | None:
        """The next line, or ``None`` if none completed within ``timeout``.

        Raises ``TransportError`` when the peer closed the link.
        """
        loop = asyncio.get_running_loop()
        deadline = loop.time() + timeout
        while not self._lines:
            remaining = deadline - loop.time()
            if remaining <= 0:
                return None
            try:
                # asyncio.timeout, not wait_for: on 3.11 wait_for can swallow a cancellation
                # that races with a completed read, and shutdown depends on cancellation
                async with asyncio.timeout(remaining):
                    data = await self._reader.read(_CHUNK)
            except TimeoutError:
                return None
            except (ConnectionError, OSError) as exc:
                raise TransportError(f"{self.name}: read failed: {exc}") from exc
            if not data:
                raise TransportError(f"{self.name}: link closed by the peer")
            log.debug("%s <- %s", self.name, data.hex())
            self._lines.extend(self._splitter.feed(data))
        return self._lines.popleft()

    def take_buffered(self) -> tuple[list[RawLine], bytes]:
        """Everything already received but not yet read, without waiting (stale input)."""
        lines = list(self._lines)
        self._lines.clear()
        tail = self._splitter.pending
        self._splitter.reset()
        return lines, tail

    async def drain_input(self, wait: float = 0.0) -> tuple[list[RawLine], bytes]:
        """Collect input that arrives within ``wait`` seconds plus what is buffered."""
        try:
            with contextlib.suppress(TimeoutError):
                while True:
                    async with asyncio.timeout(max(wait, 0.0001)):
                        data = await self._reader.read(_CHUNK)
                    if not data:
                        break
                    self._lines.extend(self._splitter.feed(data))
        except (ConnectionError, OSError) as exc:
            # an unplugged adapter or a reset between two requests: a link failure like any
            raise TransportError(f"{self.name}: read failed: {exc}") from exc
        return self.take_buffered()

    async def write(self, data: bytes, timeout: float) -> None:
        log.debug("%s -> %s", self.name, data.hex())
        try:
            self._writer.write(data)
            await within(self._writer.drain(), timeout)
        except TimeoutError as exc:
            raise TransportError(f"{self.name}: write timed out after {timeout:g} s") from exc
        except (ConnectionError, OSError) as exc:
            raise TransportError(f"{self.name}: write failed: {exc}") from exc

    async def close(self) -> None:
        self._writer.close()
        with contextlib.suppress(ConnectionError, OSError, TimeoutError):
            await within(self._writer.wait_closed(), 1.0)


async def open_line_link(
    endpoint: str,
    *,
    terminator: bytes,
    max_line: int,
    timeout: float,
    baudrate: int = 9600,
    bytesize: int = 8,
    parity: str = "N",
    stopbits: float = 1,
    name: str = "",
) -> LineLink:
    """Open ``tcp://host:port`` with asyncio, anything else (a tty path, ``socket://``,
    ``rfc2217://``) with pyserial's URL handlers."""
    splitter = LineSplitter(terminator, max_line)
    try:
        if endpoint.startswith("tcp://"):
            host, port = split_host_port(endpoint[len("tcp://") :])
            reader, writer = await within(asyncio.open_connection(host, port), timeout)
        else:
            import serial_asyncio_fast

            reader, writer = await within(
                serial_asyncio_fast.open_serial_connection(
                    url=endpoint,
                    baudrate=baudrate,
                    bytesize=bytesize,
                    parity=parity,
                    stopbits=stopbits,
                ),
                timeout,
            )
    except TimeoutError as exc:
        raise TransportError(f"{name or endpoint}: no connection within {timeout:g} s") from exc
    except (OSError, ValueError) as exc:  # serial.SerialException is an OSError
        raise TransportError(f"{name or endpoint}: cannot open {endpoint}: {exc}") from exc
    return LineLink(reader, writer, splitter, name or endpoint)


def split_host_port(text: str) -> tuple[str, int]:
    """``host:port`` → (host, port); ValueError naming what is wrong."""
    host, sep, port = text.rpartition(":")
    if not sep or not host or not port.isdigit() or not 0 < int(port) < 65536:
        raise ValueError(f"expected host:port, got {text!r}")
    return host.strip("[]"), int(port)
