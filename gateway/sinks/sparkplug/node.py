"""``[sinks.<name>] type = "sparkplug"``: Sparkplug B over MQTT, behind the journal cursor.

The gateway is one edge node (``edge_node_id``, default: slug of ``gateway_id``) in a group
(``group_id``, default: slug of ``site``); every configured station is a device (slug of its
id, see ``gateway.sinks.topics``). Topics are ``spBv1.0/<group>/<type>/<node>[/<device>]``.

On each connection attempt bdSeq moves on (0..255, wrapping) and goes in the NDEATH registered
as the MQTT last will; once connected, NBIRTH (seq 0, bdSeq, ``Node Control/Rebirth``) and a
DBIRTH per station (every metric with datatype and unit, display names as ``Properties/...``).
Then a DDATA per journalled record, in journal order, each message's seq one more than the last
(mod 256). An NCMD with ``Node Control/Rebirth`` = true repeats NBIRTH and the DBIRTHs. All at
QoS 1: ``send`` returns when every PUBACK came, so the forwarder moves the cursor only over
acknowledged records; an outage delays DDATA and never drops one (after a reconnect the backlog
follows the new births). A graceful stop publishes NDEATH itself (a clean DISCONNECT suppresses
the will).

    [sinks.plant-scada]
    type = "sparkplug"
    url = "mqtts://broker.example:8883"   # plus the [sinks.mqtt] connection keys
    group_id = "northmere-works"          # default: slug of site
    edge_node_id = "nw-l1-gw"             # default: slug of gateway_id
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from gateway.records import AlarmEvent, Record, StationStatus
from gateway.sinks import SinkContext, register_sink
from gateway.sinks.forwarder import ForwarderOptions, JournalForwarder, SinkUnavailable
from gateway.sinks.mqtt import MqttClient, MqttOptions
from gateway.sinks.sparkplug import metrics as spm
from gateway.sinks.topics import slug, station_slugs
from gateway.store.journal import Kind

__all__ = ["NAMESPACE", "SparkplugClient", "SparkplugOptions", "make_sparkplug"]

log = logging.getLogger(__name__)
NAMESPACE = "spBv1.0"
_OWN_KEYS = ("group_id", "edge_node_id")
DDATA_KINDS = ("result", "calibration", "status")
_NOT_HERE = ("topic_prefix", "topic_style", "site_id")  # plain-MQTT topic keys


def _check_id(key: str, value: object) -> str:
    if not isinstance(value, str) or not value or any(c in value for c in "/+#"):
        raise ValueError(f"{key} must be a non-empty string without '/', '+' or '#', "
                         f"got {value!r}")
    return value


@dataclass(frozen=True)
class SparkplugOptions:
    group_id: str
    edge_node_id: str

    @classmethod
    def split(cls, options: Mapping[str, Any], ctx: SinkContext
              ) -> tuple[SparkplugOptions, dict[str, Any]]:
        """Our keys, and the rest for ``MqttOptions`` (connection, TLS, kinds)."""
        wrong = sorted(k for k in options if k in _NOT_HERE)
        if wrong:
            raise ValueError(f"{', '.join(wrong)}: Sparkplug topics are fixed "
                             f"(spBv1.0/<group_id>/.../<edge_node_id>); set group_id instead")
        group = _check_id("group_id", options.get("group_id", None) or slug(ctx.site))
        node = _check_id("edge_node_id",
                         options.get("edge_node_id", None) or slug(ctx.gateway_id))
        station_slugs(ctx.stations)  # two stations on one device id: refused now
        rest = {k: v for k, v in options.items() if k not in _OWN_KEYS}
        kinds = rest.setdefault("kinds", list(DDATA_KINDS))
        if not isinstance(kinds, list) or not kinds or any(k not in DDATA_KINDS for k in kinds):
            raise ValueError(f"kinds must be a list drawn from {', '.join(DDATA_KINDS)} "
                             f"(what Sparkplug DDATA carries), got {kinds!r}")
        return cls(group, node), rest


class SparkplugClient(MqttClient):
    """``SinkClient`` publishing Sparkplug B births and DDATA on one broker connection."""

    def __init__(self, opts: MqttOptions, sp: SparkplugOptions, ctx: SinkContext,
                 sink_name: str, *, timeout_s: float = 10.0) -> None:
        super().__init__(opts, ctx, sink_name, timeout_s=timeout_s)
        self.sp = sp
        base = f"{NAMESPACE}/{sp.group_id}"
        self.ndeath_topic = f"{base}/NDEATH/{sp.edge_node_id}"
        self.nbirth_topic = f"{base}/NBIRTH/{sp.edge_node_id}"
        self.ncmd_topic = f"{base}/NCMD/{sp.edge_node_id}"
        self._base = base
        self.bd_seq = -1  # the first connection uses 0
        self._seq = 0
        self._born: set[str] = set()
        self._last: dict[str, dict[str, tuple[int, Record]]] = {}  # station → kind → newest
        self._lock = asyncio.Lock()  # births and DDATA batches never interleave their seqs
        self._listener: asyncio.Task[None] | None = None
        self.rebirths = 0

    def device_topic(self, kind: str, station: str) -> str:
        return f"{self._base}/{kind}/{self.sp.edge_node_id}/{self._level(station, self._stations)}"

    def _next_seq(self) -> int:
        seq, self._seq = self._seq, (self._seq + 1) % 256
        return seq

    async def connect(self) -> None:
        import aiomqtt

        self.bd_seq = (self.bd_seq + 1) % 256
        death = spm.encode(spm.node_death(self.bd_seq, _now_ms()))
        await self._open(aiomqtt.Will(self.ndeath_topic, death, qos=1, retain=False))
        try:
            await self._client.subscribe(self.ncmd_topic, qos=1)
        except aiomqtt.MqttError as exc:
            raise SinkUnavailable(f"subscribe to {self.ncmd_topic} failed: {exc}") from None
        self._listener = asyncio.create_task(self._listen(), name=f"{self.sink_name} NCMD")
        await self.birth()

    async def birth(self) -> None:
        """NBIRTH (seq 0) and a DBIRTH for every configured station."""
        async with self._lock:
            self._seq, self._born = 0, set()
            now = _now_ms()
            messages = [(self.nbirth_topic, spm.node_birth(self.bd_seq, now))]
            self._seq = 1
            for station, line in sorted(self.ctx.stations.items()):
                messages.append(self._dbirth(station, line, now))
            await self._publish_all([(t, spm.encode(p)) for t, p in messages])

    def _dbirth(self, station: str, line: str, now: int) -> tuple[str, Any]:
        self._born.add(station)
        payload = spm.birth_metrics(self._next_seq(), now, station=station, line=line,
                                    last=[r for _, r in self._last.get(station, {}).values()])
        return self.device_topic("DBIRTH", station), payload

    async def _publish_all(self, messages: Sequence[tuple[str, bytes]]) -> None:
        # paho puts messages on the wire in call order; tasks call it in creation order
        try:
            async with asyncio.TaskGroup() as tg:
                for topic, payload in messages:
                    tg.create_task(self._publish(topic, payload, retain=False))
        except* SinkUnavailable as group:
            raise SinkUnavailable(str(group.exceptions[0])) from None

    async def _listen(self) -> None:
        """Answer NCMD rebirth requests; ends with the connection."""
        import aiomqtt

        client = self._client
        try:
            async for message in client.messages:
                if str(message.topic) != self.ncmd_topic:
                    continue
                raw = message.payload if isinstance(message.payload, bytes) else b""
                try:
                    wanted = spm.wants_rebirth(raw)
                except ValueError as exc:
                    log.warning("sink %s: %s", self.sink_name, exc)
                    continue
                if wanted:
                    log.info("sink %s: rebirth requested by NCMD", self.sink_name)
                    self.rebirths += 1
                    with contextlib.suppress(SinkUnavailable):  # the forwarder reconnects
                        await self.birth()
        except aiomqtt.MqttError:
            return

    def check_connection(self) -> None:
        """Called by the forwarder while idle: a dead connection means a rebirth is due now
        (host applications saw NDEATH), not at the next record."""
        if self._listener is not None and self._listener.done():
            raise SinkUnavailable(f"connection to {self.describe()} lost")

    async def send(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        async with self._lock:
            now = _now_ms()
            messages: list[tuple[str, bytes]] = []
            for _, record in rows:
                if isinstance(record, AlarmEvent):
                    continue  # no device data (not in DDATA_KINDS): skipped should one come
                if record.station not in self._born:  # a station added since the births
                    line = (self.ctx.stations.get(record.station, "_")
                            if isinstance(record, StationStatus) else record.line)
                    topic, birth = self._dbirth(record.station, line, now)
                    messages.append((topic, spm.encode(birth)))
                payload = spm.record_metrics(self._next_seq(), now, record)
                messages.append((self.device_topic("DDATA", record.station), spm.encode(payload)))
            await self._publish_all(messages)
            for seq, record in rows:  # a rebirth carries the latest values (by journal seq:
                if isinstance(record, AlarmEvent):
                    continue
                last = self._last.setdefault(record.station, {})  # a backlog may come late)
                if seq > last.get(record.kind, (0, record))[0]:
                    last[record.kind] = (seq, record)

    async def close(self, *, graceful: bool) -> None:
        listener, self._listener = self._listener, None
        if listener is not None:
            listener.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await listener
        client, stack = self._client, self._stack
        self._client, self._stack = None, None
        if client is None or stack is None:
            return
        if graceful:  # a clean DISCONNECT suppresses the will: say NDEATH ourselves
            self._client = client
            with contextlib.suppress(SinkUnavailable):
                death = spm.encode(spm.node_death(self.bd_seq, _now_ms()))
                await self._publish(self.ndeath_topic, death, retain=False)
            self._client = None
        import aiomqtt

        with contextlib.suppress(aiomqtt.MqttError):
            await stack.aclose()


def _now_ms() -> int:
    return time.time_ns() // 1_000_000


def make_sparkplug(name: str, options: Mapping[str, Any], ctx: SinkContext) -> JournalForwarder:
    """``[sinks.<name>] type = "sparkplug"``: validate options now, connect when run."""
    sp, rest = SparkplugOptions.split(options, ctx)
    rest.setdefault("client_id", f"leakfleet-{ctx.gateway_id}-spb")
    opts = MqttOptions.from_options(rest, ctx)
    fwd = ForwarderOptions.from_options(options)
    client = SparkplugClient(opts, sp, ctx, name, timeout_s=fwd.send_timeout_s)
    return JournalForwarder(name, client, fwd)


register_sink("sparkplug")(make_sparkplug)
