"""MQTT sink: journalled records as JSON on a broker, QoS 1, with a retained gateway state.

Topics (``topic_prefix`` defaults to ``leakfleet``):
    <prefix>/<site>/<line>/<station>/result        one message per TestResult
    <prefix>/<site>/<line>/<station>/calibration   one per CalibrationEvent
    <prefix>/<site>/<line>/<station>/status        StationStatus, retained (the latest state)
    <prefix>/<site>/<line>/<station>/meta          retained on connect (``topic_style = "ids"``):
                                                   display names of site, line and station
    <prefix>/<site>/gateway/<gateway id>/state     "online" (retained) on connect; the last
                                                   will, also retained, is "offline"
    <prefix>/<site>/<line>/<station>/alarm         one per AlarmEvent: an alarm raised,
                                                   acknowledged or cleared (never retained)
    <prefix>/<site>/<line>/<station>/alarms/<key>  retained: the alarm's state now (the last
                                                   event's payload); cleared → an empty
                                                   retained message, which removes it
    <prefix>/<site>/gateway/<gateway id>/alarm     the same two for fleet-wide alarms (a sink's
    <prefix>/<site>/gateway/<gateway id>/alarms/<key>    backlog), which have no station
Topic levels are slugs of the ids (``gateway.sinks.topics``: lower-case, any other character
than a-z 0-9 - _ becomes ``-``; ``site_id`` overrides the site's slug). ``topic_style =
"names"`` keeps the names as given (``+``, ``#`` and ``/`` become ``_``) for subscribers of
older releases, and sends no meta topic. Payload: ``record.to_dict()`` as JSON (with id topics
plus ``site``, the display name): it carries ``schema``, ``record_id`` and the station and line
as configured, so a consumer can de-duplicate the repeats at-least-once delivery allows. A
status's or an alarm's line comes from the gateway config (neither carries one). An alarm's
payload adds ``state`` (active, acknowledged, cleared) and ``line``; ``<key>`` is the slug of
the alarm's key (``reject-streak:L1-S1`` → ``reject-streak-l1-s1``), so subscribing to
``<prefix>/+/+/+/alarms/+`` and ``<prefix>/+/gateway/+/alarms/+`` shows every open alarm.

``send`` publishes a batch at QoS 1 and returns once the broker sent a PUBACK for every
message (aiomqtt's ``publish`` waits for paho's on_publish), so the forwarder moves its cursor
only over acknowledged records. Credentials: ``username`` in the config, the password only from
``LEAKFLEET_MQTT_PASSWORD`` or ``password_file``; never in a log line.

    [sinks.mqtt]
    url = "mqtts://broker.example:8883"     # mqtt:// (1883) or mqtts:// (8883, TLS)
    username = "gw-l1"
    password_file = "/etc/leakfleet/mqtt-password"   # or env LEAKFLEET_MQTT_PASSWORD
    ca_file = "/etc/leakfleet/ca.pem"        # TLS: CA bundle (default: system CAs)
    cert_file = "..."; key_file = "..."      # TLS client certificate, when the broker wants one
    protocol = "5"                           # "3.1.1" (default) or "5"
    client_id = "leakfleet-gw-l1"            # default: leakfleet-<gateway id>
    topic_style = "ids"                      # "ids" (default) or "names" (older releases)
    site_id = "northmere"                    # the site's topic level (default: slug of site)
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import ssl
import urllib.parse
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from gateway.errors import ConfigError
from gateway.records import AlarmEvent, Record, StationStatus
from gateway.sinks import SinkContext, register_sink
from gateway.sinks.forwarder import (
    ForwarderOptions,
    JournalForwarder,
    SinkRefused,
    SinkUnavailable,
    read_secret,
)
from gateway.sinks.topics import slug, station_slugs
from gateway.store.journal import KINDS, Kind

__all__ = ["MqttClient", "MqttOptions", "make_mqtt", "parse_mqtt_url", "topic_for"]

log = logging.getLogger(__name__)
#: publishes awaiting their PUBACK at once: a backlog of thousands goes out in steps of this
MAX_INFLIGHT = 20
#: the MQTT library's own chatter ("There are N pending publish calls") stays out of the
#: user's log unless it is an error
_LIBRARY_LOG = logging.getLogger("gateway.sinks.mqtt.library")
_LIBRARY_LOG.setLevel(logging.ERROR)

PASSWORD_ENV = "LEAKFLEET_MQTT_PASSWORD"
_KEYS = (
    "url", "username", "password_file", "ca_file", "cert_file", "key_file", "protocol",
    "client_id", "topic_prefix", "keepalive_s", "kinds", "max_payload_bytes", "topic_style",
    "site_id",
)
TOPIC_STYLES = ("ids", "names")
# CONNACK codes that mean "your credentials are wrong" (MQTT 3.1.1: 4, 5; MQTT 5: 0x86, 0x87)
_AUTH_CODES = {4, 5, 134, 135}


def parse_mqtt_url(url: str) -> tuple[str, int, bool]:
    """``mqtt://host[:port]`` / ``mqtts://host[:port]`` → (host, port, tls)."""
    parts = urllib.parse.urlsplit(url)
    if parts.password is not None:  # first, so no later message echoes the secret
        raise ValueError(
            f"url: put no password in the URL; set {PASSWORD_ENV} or password_file instead"
        )
    if parts.scheme not in ("mqtt", "mqtts") or not parts.hostname:
        raise ValueError(f"url {url!r}: expected mqtt://host:port or mqtts://host:port")
    if parts.path not in ("", "/") or parts.query:
        raise ValueError(f"url {url!r}: expected no path or query after host:port")
    tls = parts.scheme == "mqtts"
    try:
        port = parts.port or (8883 if tls else 1883)
    except ValueError as exc:
        raise ValueError(f"url {url!r}: bad port") from exc
    return parts.hostname, port, tls


def _segment(name: str) -> str:
    cleaned = name.replace("/", "_").replace("+", "_").replace("#", "_").replace("\0", "")
    return cleaned or "_"


def topic_for(prefix: str, site: str, line: str, station: str, kind: str) -> str:
    return "/".join((prefix, _segment(site), _segment(line), _segment(station), kind))


@dataclass(frozen=True)
class MqttOptions:
    host: str
    port: int
    tls: bool
    username: str | None
    password_file: str | None
    ca_file: str | None
    cert_file: str | None
    key_file: str | None
    v5: bool
    client_id: str
    topic_prefix: str
    keepalive_s: int
    kinds: tuple[Kind, ...]
    max_payload_bytes: int = 262_144  # set it to the broker's limit (message_size_limit)
    topic_style: str = "ids"
    site_id: str | None = None

    @classmethod
    def from_options(cls, options: Mapping[str, Any], ctx: SinkContext) -> MqttOptions:
        unknown = sorted(set(options) - set(_KEYS) - set(ForwarderOptions.KEYS))
        if "password" in unknown:
            raise ValueError(
                f"password does not belong in the config; set {PASSWORD_ENV} or password_file"
            )
        if unknown:
            raise ValueError(f"unknown key(s) {', '.join(unknown)}; expected {', '.join(_KEYS)}")
        if "url" not in options:
            raise ValueError("url is required (mqtt://host:port or mqtts://host:port)")
        host, port, tls = parse_mqtt_url(str(options["url"]))
        url_user = urllib.parse.urlsplit(str(options["url"])).username
        text = {k: _opt_text(options, k) for k in (
            "username", "password_file", "ca_file", "cert_file", "key_file", "client_id",
            "topic_prefix", "site_id")}
        if (text["cert_file"] is None) != (text["key_file"] is None):
            raise ValueError("cert_file and key_file go together (the TLS client certificate)")
        if (text["ca_file"] or text["cert_file"]) and not tls:
            raise ValueError("ca_file/cert_file need an mqtts:// url")
        protocol = str(options.get("protocol", "3.1.1"))
        if protocol not in ("3.1.1", "5", "5.0"):
            raise ValueError(f"protocol must be \"3.1.1\" or \"5\", got {protocol!r}")
        keepalive = options.get("keepalive_s", 30)
        if isinstance(keepalive, bool) or not isinstance(keepalive, int) or keepalive < 5:
            raise ValueError(f"keepalive_s must be an integer >= 5, got {keepalive!r}")
        limit = options.get("max_payload_bytes", 262_144)
        if isinstance(limit, bool) or not isinstance(limit, int) or not 256 <= limit <= 268_435_455:
            raise ValueError(f"max_payload_bytes must be an integer from 256 to 268435455 "
                             f"(MQTT's maximum), got {limit!r}")
        style = options.get("topic_style", "ids")
        if style not in TOPIC_STYLES:
            raise ValueError(f"topic_style must be \"ids\" or \"names\", got {style!r}")
        site_id = text["site_id"]
        if site_id is not None and slug(site_id) != site_id:
            raise ValueError(f"site_id {site_id!r} is not a topic level: use lower-case "
                             f"letters, digits, - and _ (e.g. {slug(site_id)!r})")
        if style == "ids":  # refuse two ids on one topic now, not at the first message
            slug(site_id or ctx.site)
            station_slugs(ctx.stations)
        return cls(
            topic_style=style, site_id=site_id,
            max_payload_bytes=limit,
            host=host, port=port, tls=tls,
            username=text["username"] or url_user,
            password_file=text["password_file"],
            ca_file=text["ca_file"], cert_file=text["cert_file"], key_file=text["key_file"],
            v5=protocol.startswith("5"),
            client_id=text["client_id"] or f"leakfleet-{ctx.gateway_id}",
            topic_prefix=(text["topic_prefix"] or "leakfleet").strip("/"),
            keepalive_s=keepalive,
            kinds=_kinds(options.get("kinds")),
        )


def _opt_text(options: Mapping[str, Any], key: str) -> str | None:
    value = options.get(key)
    if value is None:
        return None
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"{key} must be a non-empty string, got {value!r}")
    return value


def _kinds(value: Any) -> tuple[Kind, ...]:
    if value is None:
        return KINDS
    if not isinstance(value, list) or not value or any(v not in KINDS for v in value):
        raise ValueError(f"kinds must be a list drawn from {', '.join(KINDS)}, got {value!r}")
    return tuple(k for k in KINDS if k in value)


class MqttClient:
    """``SinkClient`` for one broker (aiomqtt 2.x; a fresh ``aiomqtt.Client`` per connection)."""

    def __init__(
        self, opts: MqttOptions, ctx: SinkContext, sink_name: str, *, timeout_s: float = 10.0
    ) -> None:
        self.opts = opts
        self.timeout_s = timeout_s  # a PUBACK that does not come within this is a failure
        self.ctx = ctx
        self.kinds = opts.kinds
        self.sink_name = sink_name
        if opts.topic_style == "ids":
            self._site_level = opts.site_id or slug(ctx.site)
            self._lines, self._stations = station_slugs(ctx.stations)
            gw_level = slug(ctx.gateway_id)
        else:
            self._site_level = _segment(ctx.site)
            self._lines, self._stations = {}, {}
            gw_level = _segment(ctx.gateway_id)
        self.gateway_topic = "/".join((opts.topic_prefix, self._site_level, "gateway", gw_level))
        self.state_topic = f"{self.gateway_topic}/state"
        self._client: Any = None
        self._inflight = asyncio.Semaphore(MAX_INFLIGHT)
        self._stack: contextlib.AsyncExitStack | None = None
        self._password: str | None = None
        self._tls_context: ssl.SSLContext | None = None
        self._prepared = False

    def describe(self) -> str:
        scheme = "mqtts" if self.opts.tls else "mqtt"
        who = f"{self.opts.username}@" if self.opts.username else ""
        return f"{scheme}://{who}{self.opts.host}:{self.opts.port}"

    def _prepare(self) -> None:
        """Secrets and TLS files, read once at the first connect (a ConfigError disables us)."""
        if self._prepared:
            return
        what = f"sink {self.sink_name}"
        self._password = read_secret(PASSWORD_ENV, self.opts.password_file, what)
        if self._password and not self.opts.username:
            raise ConfigError(f"{what}: a password is set but no username")
        from gateway.influxdb.http import clear_text_warning

        warning = clear_text_warning(self.opts, bool(self._password))
        if warning:
            log.warning("%s: %s", what, warning.replace("https:// (influxdbs:// / "
                                                         "influxdb2s://)", "mqtts://"))
        if self.opts.tls:
            try:
                context = ssl.create_default_context(cafile=self.opts.ca_file)
                if self.opts.cert_file and self.opts.key_file:
                    context.load_cert_chain(self.opts.cert_file, self.opts.key_file)
            except (OSError, ssl.SSLError) as exc:
                raise ConfigError(f"{what}: TLS files: {exc}") from exc
            self._tls_context = context
        self._prepared = True

    async def connect(self) -> None:
        import aiomqtt

        await self._open(aiomqtt.Will(self.state_topic, b"offline", qos=1, retain=True))
        await self._publish(self.state_topic, b"online", retain=True)
        for topic, payload in self.meta_messages():
            await self._publish(topic, payload, retain=True)

    async def _open(self, will: Any) -> None:
        """Connect a fresh aiomqtt client with this last will (shared with Sparkplug)."""
        import aiomqtt

        self._prepare()
        client = aiomqtt.Client(
            self.opts.host,
            self.opts.port,
            username=self.opts.username,
            password=self._password,
            identifier=self.opts.client_id,
            will=will,
            tls_context=self._tls_context,
            protocol=aiomqtt.ProtocolVersion.V5 if self.opts.v5 else aiomqtt.ProtocolVersion.V311,
            clean_session=None if self.opts.v5 else True,
            keepalive=self.opts.keepalive_s,
            timeout=self.timeout_s,
            logger=_LIBRARY_LOG,
            max_inflight_messages=MAX_INFLIGHT,
        )
        stack = contextlib.AsyncExitStack()
        try:
            await stack.enter_async_context(client)
        except aiomqtt.MqttCodeError as exc:
            await stack.aclose()
            raise SinkUnavailable(self._refusal(exc)) from None
        except aiomqtt.MqttError as exc:
            await stack.aclose()
            raise SinkUnavailable(f"cannot connect to {self.describe()}: {exc}") from None
        self._client, self._stack = client, stack

    def meta_messages(self) -> list[tuple[str, bytes]]:
        """Retained ``…/meta`` per station: the display names behind the slugged levels."""
        if self.opts.topic_style != "ids":
            return []
        out = []
        for station, line in sorted(self.ctx.stations.items()):
            doc = {"site": self.ctx.site, "site_id": self._site_level, "line": line,
                   "line_id": self._level(line, self._lines), "station": station,
                   "station_id": self._level(station, self._stations),
                   "gateway_id": self.ctx.gateway_id}
            topic = "/".join((self.opts.topic_prefix, self._site_level, doc["line_id"],
                              doc["station_id"], "meta"))
            out.append((topic, json.dumps(doc, separators=(",", ":")).encode()))
        return out

    @staticmethod
    def _level(name: str, known: Mapping[str, str]) -> str:
        if name in known:
            return known[name]
        try:
            return slug(name)
        except ValueError:
            return "_"

    def _refusal(self, exc: Any) -> str:
        rc = exc.rc
        code = getattr(rc, "value", rc)
        if code in _AUTH_CODES:
            user = f"user {self.opts.username!r}" if self.opts.username else "anonymous login"
            return (
                f"{self.describe()} refused the login ({user}): {exc}; check username and "
                f"{PASSWORD_ENV} / password_file"
            )
        return f"{self.describe()} refused the connection: {exc}"

    async def _publish(self, topic: str, payload: bytes, *, retain: bool) -> None:
        import aiomqtt

        if self._client is None:
            raise SinkUnavailable(f"not connected to {self.describe()}")
        try:
            async with self._inflight:  # a backlog goes out MAX_INFLIGHT at a time
                await self._client.publish(topic, payload, qos=1, retain=retain)
        except aiomqtt.MqttError as exc:
            raise SinkUnavailable(f"publish to {self.describe()} failed: {exc}") from None

    def topic(self, record: Record) -> str:
        if isinstance(record, AlarmEvent) and record.station is None:
            return f"{self.gateway_topic}/alarm"  # a fleet-wide alarm: the gateway's level
        station = str(record.station)
        line = (self.ctx.stations.get(station)
                if isinstance(record, StationStatus | AlarmEvent) else record.line)
        if self.opts.topic_style == "names":
            return topic_for(self.opts.topic_prefix, self.ctx.site, line or "_", station,
                             record.kind)
        # a record from a station no longer configured still gets a level (slug, or "_")
        line_level = self._level(line, self._lines) if line else "_"
        return "/".join((self.opts.topic_prefix, self._site_level, line_level,
                         self._level(station, self._stations), record.kind))

    def alarm_state_topic(self, event: AlarmEvent) -> str:
        """The retained topic that holds one alarm's state while it is open."""
        key = _segment(event.key) if self.opts.topic_style == "names" else self._level(
            event.key, {})
        return f"{self.topic(event)}s/{key}"

    def payload(self, record: Record) -> dict[str, Any]:
        """The record as JSON; with id topics also the site's display name (``site``), which
        the topic no longer shows."""
        doc = record.to_dict()
        if self.opts.topic_style == "ids":
            doc["site"] = self.ctx.site
        if isinstance(record, AlarmEvent):
            doc["state"] = record.state
            doc["line"] = self.ctx.stations.get(record.station) if record.station else None
        return doc

    async def send(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        # paho puts each message on the wire in call order (so the last status of a station is
        # the one left retained); tasks start in creation order and call paho before awaiting.
        retain = kind == "status"
        payloads = [json.dumps(self.payload(record), separators=(",", ":")).encode()
                    for _, record in rows]
        too_big = [len(p) for p in payloads if len(p) > self.opts.max_payload_bytes]
        if too_big:  # the broker would drop or disconnect us: refuse it here, with a reason
            raise SinkRefused(f"payload of {max(too_big)} bytes is over the broker's limit "
                              f"(max_payload_bytes = {self.opts.max_payload_bytes})")
        try:
            async with asyncio.TaskGroup() as tg:
                for (_, record), payload in zip(rows, payloads, strict=True):
                    tg.create_task(self._publish(self.topic(record), payload, retain=retain))
                    if isinstance(record, AlarmEvent):  # and the alarm's retained state
                        state = b"" if record.change == "cleared" else payload
                        tg.create_task(self._publish(self.alarm_state_topic(record), state,
                                                     retain=True))
        except* SinkUnavailable as group:
            raise SinkUnavailable(str(group.exceptions[0])) from None

    async def close(self, *, graceful: bool) -> None:
        client, stack = self._client, self._stack
        self._client, self._stack = None, None
        if client is None or stack is None:
            return
        if graceful:
            # a clean DISCONNECT suppresses the will, so say "offline" ourselves
            with contextlib.suppress(SinkUnavailable):
                self._client = client
                await self._publish(self.state_topic, b"offline", retain=True)
            self._client = None
        import aiomqtt

        with contextlib.suppress(aiomqtt.MqttError):
            await stack.aclose()


def make_mqtt(name: str, options: Mapping[str, Any], ctx: SinkContext) -> JournalForwarder:
    """``[sinks.<name>] type = "mqtt"``: validate options now, connect when run."""
    opts = MqttOptions.from_options(options, ctx)
    fwd = ForwarderOptions.from_options(options)
    client = MqttClient(opts, ctx, name, timeout_s=fwd.send_timeout_s)
    return JournalForwarder(name, client, fwd)


register_sink("mqtt")(make_mqtt)
