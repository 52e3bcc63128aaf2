"""Read-only Modbus reads for ``leakfleet probe modbus``: safe chunks, bounded, one-line errors.

Reads never write. A range is read in chunks a station must accept (125 registers, 2000 bits,
or less with ``--chunk``); a chunk the station refuses with "illegal data address" is split in
halves until the readable parts are found (within ``max_reads``), so one hole in a register map
does not hide the rest. Errors a person meets on site become one line: nothing listening, no
answer (wrong device id or the station is off), a device id the station does not serve.
"""

from __future__ import annotations

import asyncio
import contextlib
from dataclasses import dataclass, field
from typing import Any

from gateway.drivers.lines import split_host_port
from gateway.errors import TransportError

__all__ = ["Probe", "ReadPlan", "parse_range"]

MAX_REGISTERS = 125  # Modbus application protocol: registers per read (functions 3, 4)
MAX_BITS = 2000  # coils / discrete inputs per read (functions 1, 2)
_EXCEPTIONS = {
    1: "illegal function (the station does not serve this table)",
    2: "illegal data address",
    3: "illegal data value",
    4: "device failure",
    10: "gateway path unavailable",
    11: "gateway target device failed to respond (wrong device id?)",
}


def parse_range(text: str) -> tuple[int, int]:
    """``0-299`` or ``100`` → (first, last), both inclusive, within 0..65535."""
    first, sep, last = text.partition("-")
    try:
        lo, hi = int(first, 0), int(last, 0) if sep else int(first, 0)
    except ValueError:
        raise ValueError(f"--range: expected FIRST-LAST such as 0-299, got {text!r}") from None
    if not 0 <= lo <= hi <= 0xFFFF:
        raise ValueError(f"--range: expected 0 <= first <= last <= 65535, got {text!r}")
    return lo, hi


@dataclass
class ReadPlan:
    """What was read and what was refused, per table."""

    values: dict[tuple[str, int], int] = field(default_factory=dict)
    refused: list[tuple[str, int, int, str]] = field(default_factory=list)  # table, lo, hi, why
    reads: int = 0

    def refused_ranges(self) -> list[tuple[str, int, int, str]]:
        """Refused reads with neighbours of the same table and reason joined."""
        out: list[tuple[str, int, int, str]] = []
        for table, lo, hi, why in sorted(self.refused):
            if out and out[-1][0] == table and out[-1][3] == why and lo <= out[-1][2] + 1:
                out[-1] = (table, out[-1][1], max(hi, out[-1][2]), why)
            else:
                out.append((table, lo, hi, why))
        return out


class Probe:
    """One Modbus client, read-only, with a read budget."""

    def __init__(self, endpoint: str, *, device_id: int, timeout_s: float = 1.0,
                 baudrate: int = 19200, parity: str = "N", stopbits: int = 1,
                 max_reads: int = 400, chunk: int = MAX_REGISTERS) -> None:
        self.endpoint = endpoint
        self.device_id = device_id
        self.timeout_s = timeout_s
        self.serial = (baudrate, parity, stopbits)
        self.max_reads = max_reads
        self.chunk = max(1, min(chunk, MAX_REGISTERS))
        self._client: Any = None

    async def __aenter__(self) -> Probe:
        from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
        from pymodbus.framer import FramerType

        common: dict[str, Any] = {"timeout": self.timeout_s, "retries": 0, "reconnect_delay": 0}
        client: AsyncModbusTcpClient | AsyncModbusSerialClient
        if self.endpoint.startswith("tcp://"):
            host, port = split_host_port(self.endpoint[len("tcp://"):])
            client = AsyncModbusTcpClient(host, port=port, **common)
        elif "://" in self.endpoint:
            raise ValueError(f"endpoint {self.endpoint!r}: expected tcp://host:port or a serial "
                             "device path such as /dev/ttyUSB0")
        else:
            baud, parity, stop = self.serial
            client = AsyncModbusSerialClient(self.endpoint, framer=FramerType.RTU,
                                             baudrate=baud, parity=parity, stopbits=stop,
                                             **common)
        try:
            ok = await asyncio.wait_for(client.connect(), self.timeout_s + 2.0)
        except (TimeoutError, OSError) as exc:
            client.close()
            raise TransportError(f"cannot connect to {self.endpoint}: {exc or 'timeout'}") from None
        if not ok:
            client.close()
            raise TransportError(f"cannot connect to {self.endpoint} (nothing listening, or the "
                                 "port is busy)")
        self._client = client
        return self

    async def __aexit__(self, *exc: object) -> None:
        if self._client is not None:
            with contextlib.suppress(OSError):
                self._client.close()

    async def _read_once(self, table: str, address: int, count: int) -> list[int]:
        from pymodbus.exceptions import ModbusException

        client = self._client
        call = {
            "holding": client.read_holding_registers,
            "input": client.read_input_registers,
            "coils": client.read_coils,
            "discrete": client.read_discrete_inputs,
        }[table]
        try:
            reply = await asyncio.wait_for(call(address, count=count, device_id=self.device_id),
                                           self.timeout_s + 0.5)
        except (TimeoutError, ModbusException) as exc:
            raise TransportError(
                f"no answer from device {self.device_id} at {self.endpoint} within "
                f"{self.timeout_s:g} s (wrong device id, wrong serial settings, or the station "
                f"is off){'' if isinstance(exc, TimeoutError) else f': {exc}'}"
            ) from None
        if reply.isError():
            code = int(getattr(reply, "exception_code", 0) or 0)
            raise _Refused(code)
        if table in ("coils", "discrete"):
            return [int(bool(b)) for b in reply.bits[:count]]
        return list(reply.registers)

    async def read(self, table: str, lo: int, hi: int, plan: ReadPlan) -> None:
        """Read ``lo..hi`` of ``table`` into ``plan``, splitting refused chunks."""
        size = MAX_BITS if table in ("coils", "discrete") else self.chunk
        pending = [(a, min(a + size - 1, hi)) for a in range(lo, hi + 1, size)]
        while pending:
            a, b = pending.pop(0)
            if plan.reads >= self.max_reads:
                plan.refused.append((table, a, b, f"not read: read budget of {self.max_reads} "
                                     "used up"))
                continue
            plan.reads += 1
            try:
                values = await self._read_once(table, a, b - a + 1)
            except _Refused as exc:
                if exc.code == 2 and b > a:
                    mid = (a + b) // 2
                    pending[:0] = [(a, mid), (mid + 1, b)]
                    continue
                if exc.code == 11:
                    raise TransportError(f"device {self.device_id}: {_EXCEPTIONS[11]}") from None
                plan.refused.append((table, a, b, _EXCEPTIONS.get(exc.code,
                                                                  f"exception {exc.code:02d}")))
                continue
            for k, v in enumerate(values):
                plan.values[(table, a + k)] = v


class _Refused(Exception):
    def __init__(self, code: int) -> None:
        super().__init__(code)
        self.code = code
