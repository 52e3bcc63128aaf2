"""Streaming line stations (lf-delim, lf-semi, lf-noclock): one line per record to every TCP
client, as a serial device server does. The types differ only in how a record becomes a line."""

from __future__ import annotations

import asyncio
import logging
import random
from collections.abc import Callable
from zoneinfo import ZoneInfo

from sim.formats import Encoded, delim_calibration, delim_result
from sim.formats_serial import (
    noclock_calibration,
    noclock_result,
    semi_calibration,
    semi_result,
)
from sim.formats_traces import delim_trace
from sim.servers.base import Endpoint, TcpPort, TruthSink, garbage_bytes, truncate
from sim.station import Activity, SimCalibration, SimResult

__all__ = ["STREAM_TYPES", "DelimServer", "encoder_for"]

Encoder = Callable[[SimResult | SimCalibration], Encoded]


def encoder_for(kind: str, tz: ZoneInfo) -> Encoder:
    """How a streaming station of ``kind`` turns a record into a line."""
    def delim(rec: SimResult | SimCalibration) -> Encoded:
        return delim_result(rec, tz) if isinstance(rec, SimResult) else delim_calibration(rec, tz)

    def semi(rec: SimResult | SimCalibration) -> Encoded:
        return semi_result(rec, tz) if isinstance(rec, SimResult) else semi_calibration(rec, tz)

    def noclock(rec: SimResult | SimCalibration) -> Encoded:
        return noclock_result(rec) if isinstance(rec, SimResult) else noclock_calibration(rec)

    return {"lf-delim": delim, "lf-semi": semi, "lf-noclock": noclock}[kind]


STREAM_TYPES = ("lf-delim", "lf-semi", "lf-noclock")

log = logging.getLogger(__name__)
_EOL = b"\r\n"
_WRITE_TIMEOUT_S = 2.0


class DelimServer(TcpPort):
    """Streams one line per record; lines sent while nobody listens are lost, as on a real
    line. ``kind`` picks the line format (lf-delim by default)."""

    def __init__(
        self, station: str, port: int, tz: ZoneInfo, truth: TruthSink, rng: random.Random,
        kind: str = "lf-delim",
    ) -> None:
        self.station = station
        self.port = port
        self.tz = tz
        self.truth = truth
        self.rng = rng
        self.kind = kind
        self._encode = encoder_for(kind, tz)
        self.endpoint = Endpoint(station, kind, "tcp", "127.0.0.1", port)
        self._port_init(port)

    async def start(self) -> None:
        await self._open()
        self.endpoint = Endpoint(self.station, self.kind, "tcp", "127.0.0.1", self.port)

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
        encoded = self._encode(activity.record)
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
        for role, cycle, trace in activity.traces:
            await self._send(delim_trace(role, cycle, trace) + _EOL)
        curves = [{"role": r, "cycle": c, "samples": len(t.pressures_pa)}
                  for r, c, t in activity.traces]
        self.truth.record(
            activity,
            encoded.reported,
            encoded.resolution,
            fault=fault,
            listeners=listeners,
            raw=line.decode("ascii"),
            **({"traces": curves} if curves else {}),
        )

    async def set_state(self, state: str) -> None:
        return None  # a streaming station has no status to poll
