"""Drivers: the transport seam between stations and the rest of the gateway.

A driver moves bytes and registers and nothing else. What it hides:

* **where the station is**: ``tcp://host:port`` (a serial device server or Modbus TCP), a tty
  path, or a pyserial URL (``socket://host:port``, ``rfc2217://...``);
* **how it is asked**: listen to a line stream, send a query and read the answer up to its end
  line, or run the Modbus consistent ring read (counter, slots, counter again);
* **when the wire misbehaves**: timeouts on every await, reconnects with capped exponential
  backoff and jitter, torn register blocks retried, late answers and line noise collected
  rather than lost, health per station (``StationStatus`` on every change of state).

What it does not know: what a line or a register block means. That is the station's profile
(``gateway.profiles``), whose pure parsers and decoders turn raw input into canonical records
or a ``Rejected``. A driver hands everything, records, rejections and statuses alike, to an
``Outbox`` (the runtime's journal writer), which may make it wait when the journal is behind.

The seam inside: serial drivers talk to a ``LineLink`` (``read_line`` / ``write`` with
timeouts) and Modbus polling to a ``RegisterLink`` (one ``read`` method). Unit tests script
those two small interfaces; integration tests run the real ones against real peers.
"""

from gateway.drivers.base import (
    ExceptionReply,
    Item,
    LinkLost,
    NoAnswer,
    Outbox,
    Pacing,
    StationTarget,
)
from gateway.drivers.lines import LineLink, LineSplitter, RawLine, open_line_link
from gateway.drivers.modbus import PymodbusLink, RegisterLink, RingReader, run_modbus_bus
from gateway.drivers.serial import run_request_station, run_stream_station

__all__ = [
    "ExceptionReply",
    "Item",
    "LineLink",
    "LineSplitter",
    "LinkLost",
    "NoAnswer",
    "Outbox",
    "Pacing",
    "PymodbusLink",
    "RawLine",
    "RegisterLink",
    "RingReader",
    "StationTarget",
    "open_line_link",
    "run_modbus_bus",
    "run_request_station",
    "run_stream_station",
]
