"""Real pseudo-terminals for tests of the serial paths.

    from tests.support.pty import open_pty, null_modem

    with open_pty() as p:                 # p.path is the slave, the code under test opens it
        os.write(p.master, b"R;1;...\\r\\n")

    async with null_modem() as (a, b):    # two ttys wired to each other (for Modbus RTU:
        ...                               # a server on a, the client on b)

Both ends are put in raw mode (``tty.setraw``) so no line discipline rewrites bytes, and the
test keeps the slave open too, so the master never reads EIO while the code under test has
the line closed (between reconnects, say).
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import tty
from collections.abc import AsyncIterator, Iterator
from dataclasses import dataclass

__all__ = ["Pty", "null_modem", "open_pty", "read_available"]


@dataclass
class Pty:
    master: int
    slave: int
    path: str

    def close(self) -> None:
        for fd in (self.master, self.slave):
            with contextlib.suppress(OSError):
                os.close(fd)


def _open() -> Pty:
    master, slave = os.openpty()
    tty.setraw(master)
    tty.setraw(slave)
    os.set_blocking(master, False)
    return Pty(master, slave, os.ttyname(slave))


@contextlib.contextmanager
def open_pty() -> Iterator[Pty]:
    """A raw pty pair; the master is non-blocking."""
    pty = _open()
    try:
        yield pty
    finally:
        pty.close()


def read_available(fd: int) -> bytes:
    """Whatever the master has buffered right now (b"" if nothing)."""
    chunks = []
    while True:
        try:
            data = os.read(fd, 4096)
        except (BlockingIOError, OSError):
            break
        if not data:
            break
        chunks.append(data)
    return b"".join(chunks)


@contextlib.asynccontextmanager
async def null_modem() -> AsyncIterator[tuple[str, str]]:
    """Two tty paths whose traffic the running loop relays to each other (a crossed cable)."""
    a, b = _open(), _open()
    loop = asyncio.get_running_loop()

    def relay(src: int, dst: int) -> None:
        data = read_available(src)
        if data:
            with contextlib.suppress(BlockingIOError, OSError):
                os.write(dst, data)

    loop.add_reader(a.master, relay, a.master, b.master)
    loop.add_reader(b.master, relay, b.master, a.master)
    try:
        yield a.path, b.path
    finally:
        for p in (a, b):
            with contextlib.suppress(ValueError, OSError):
                loop.remove_reader(p.master)
            p.close()
