"""Sinks: forwarders that carry journalled records on to other systems (MQTT, InfluxDB, ...).

The seam: the journal is the source of truth and a sink only ever reads it, forward from its
own persisted cursor (``Journal.read_after`` / ``get_cursor`` / ``set_cursor``), so a sink that
is down delays its data and never loses it. The runtime knows nothing about a sink beyond this
module: each ``[sinks.<name>]`` table of gateway.toml names a sink type (``type = "mqtt"``;
default: the table's name) and the runtime calls that type's factory from ``REGISTRY`` with the
table's other keys. A factory validates its options and raises ``ValueError`` (or
``ConfigError``) for a mistake, so the gateway refuses to start half-configured; a forwarder
whose ``run`` fails later is logged and disabled while everything else keeps going.

    @register_sink("mqtt")
    def make_mqtt(name: str, options: Mapping[str, Any], ctx: SinkContext) -> Forwarder: ...
"""

from __future__ import annotations

import asyncio
from collections.abc import Awaitable, Callable, Mapping
from dataclasses import dataclass
from typing import Any, Protocol, runtime_checkable

from gateway.aio import Pulse

__all__ = [
    "REGISTRY", "Attachable", "CursorSaver", "Forwarder", "SinkContext", "SinkFactory",
    "register_sink",
]


@dataclass(frozen=True)
class SinkContext:
    """What a forwarder needs to know about the gateway it runs in."""

    site: str
    gateway_id: str
    store_url: str  # the journal (sqlite:///...)
    stations: Mapping[str, str]  # station → line


class Forwarder(Protocol):
    """Reads the journal from its own cursor and pushes on, until ``stop`` is set."""

    name: str

    async def run(self, store_url: str, stop: asyncio.Event) -> None: ...


# (sink, kind, seq) -> True once persisted, False if the writer is gone (save it yourself)
CursorSaver = Callable[[str, str, int], Awaitable[bool]]


@runtime_checkable
class Attachable(Protocol):
    """A forwarder that runs beside the runtime's journal writer: it is woken by each commit
    (else it polls) and persists its cursor on the writer's connection (else on its own, where
    its write would contend with the writer's commits for SQLite's lock)."""

    def attach(self, committed: Pulse, save_cursor: CursorSaver) -> None: ...


SinkFactory = Callable[[str, Mapping[str, Any], SinkContext], Forwarder]

REGISTRY: dict[str, SinkFactory] = {}


def register_sink(kind: str) -> Callable[[SinkFactory], SinkFactory]:
    """Class or function decorator: make ``kind`` usable as ``[sinks.<name>] type``."""

    def add(factory: SinkFactory) -> SinkFactory:
        REGISTRY[kind] = factory
        return factory

    return add
