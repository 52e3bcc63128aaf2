"""lf-kv: a station that answers ``?LAST``, ``?CAL`` and ``?ID`` on a serial line (a pty)."""

from __future__ import annotations

import asyncio
import contextlib
import logging
import os
import random
from pathlib import Path

from sim.formats import kv_calibration, kv_id, kv_result
from sim.scenario import Faults
from sim.servers.base import Endpoint, TruthSink, garbage_bytes
from sim.servers.pty import PtyPair, open_pty
from sim.station import Activity, SimResult

__all__ = ["KvServer"]

log = logging.getLogger(__name__)
_EOL = b"\r\n"
_MAX_QUERY = 256


class KvServer:
    """Request/response over a pty; keeps the last result and calibration until replaced."""

    def __init__(
        self,
        station: str,
        serial: str,
        link: Path,
        faults: Faults,
        truth: TruthSink,
        rng: random.Random,
    ) -> None:
        self.station = station
        self.serial = serial
        self.link = link
        self.faults = faults
        self.truth = truth
        self.rng = rng
        self.endpoint = Endpoint(station, "lf-kv", "tty", path=str(link))
        self._pty: PtyPair | None = None
        self._queries: asyncio.Queue[bytes | None] = asyncio.Queue()
        self._buffer = b""
        self._last: list[str] | None = None
        self._cal: list[str] | None = None
        self._pending_garbage: bytes | None = None
        self._truncate_next = False
        self._up = True

    async def start(self) -> None:
        self._pty = open_pty(self.link)
        asyncio.get_running_loop().add_reader(self._pty.master, self._readable)

    def _readable(self) -> None:
        assert self._pty is not None
        try:
            data = os.read(self._pty.master, 1024)
        except BlockingIOError:
            return
        except OSError:
            data = b""
        if not data:
            return
        self._buffer += data
        while True:
            cut = min(
                (i for i in (self._buffer.find(b"\r"), self._buffer.find(b"\n")) if i >= 0),
                default=-1,
            )
            if cut < 0:
                break
            query, self._buffer = self._buffer[:cut].strip(), self._buffer[cut + 1 :]
            if query:
                self._queries.put_nowait(query)
        if len(self._buffer) > _MAX_QUERY:
            self._buffer = b""

    def _write(self, data: bytes) -> None:
        if self._pty is None:
            return
        try:
            os.write(self._pty.master, data)
        except (BlockingIOError, OSError):
            log.debug("%s: answer dropped, nobody reads the line", self.station)

    async def serve(self) -> None:
        while (query := await self._queries.get()) is not None:
            if not self._up:
                continue  # a dead line: nothing comes back
            if self.faults.slow_probability and self.rng.random() < self.faults.slow_probability:
                await asyncio.sleep(self.faults.slow_delay_s)
            self._answer(query)

    def _answer(self, query: bytes) -> None:
        text = query.decode("ascii", "replace").upper()
        lines: list[str]
        if text == "?LAST":
            lines = self._last or ["NONE", "END"]
            if self._last is not None and self._pending_garbage is not None:
                self.truth.garbage(self.station, self._pending_garbage)
                self._write(self._pending_garbage + _EOL)
                self._pending_garbage = None
            if self._last is not None and self._truncate_next:
                self._truncate_next = False
                keep = self.rng.randint(1, len(lines) - 2)
                cut = b"".join(line.encode("ascii") + _EOL for line in lines[:keep])
                self.truth.garbage(self.station, cut.rstrip(b"\r\n"), truncated=True)
                self._write(cut)
                return
        elif text == "?CAL":
            lines = self._cal or ["NONE", "END"]
        elif text == "?ID":
            lines = kv_id(self.serial)
        else:
            lines = ["ERR=UNKNOWN", "END"]
        self._write(b"".join(line.encode("ascii") + _EOL for line in lines))

    async def publish(self, activity: Activity) -> None:
        record = activity.record
        if isinstance(record, SimResult):
            encoded = kv_result(record)
            self._last = encoded.payload
            if activity.garbage:
                self._pending_garbage = garbage_bytes(self.rng)
            self._truncate_next = activity.truncated
        else:
            encoded = kv_calibration(record)
            self._cal = encoded.payload
        self.truth.record(
            activity,
            encoded.reported,
            encoded.resolution,
            fault="truncated" if activity.truncated and isinstance(record, SimResult) else None,
            raw="\r\n".join(encoded.payload),
        )

    async def set_state(self, state: str) -> None:
        return None

    async def set_link(self, up: bool) -> None:
        self._up = up

    async def close(self) -> None:
        if self._pty is not None:
            with contextlib.suppress(ValueError, OSError):
                asyncio.get_running_loop().remove_reader(self._pty.master)
            self._pty.close()
            self._pty = None
        self._queries.put_nowait(None)
