"""``[sinks.<name>] type = "opcua"``: a read-only OPC UA server with each station's latest data.

Address space (namespace ``urn:leakfleet:<gateway id>``), node ids are strings on the ids:

    Objects/LeakFleet/<site>/<line>/<station>/
        LastResult/      ended_at, cycle, program, verdict, part_id, leak_rate [sccm],
                         reject_limit [sccm], pressure_loss [Pa], test_pressure [Pa],
                         fill_time [s], stabilise_time [s], test_time [s],
                         temperature [°C], record_id
        LastCalibration/ ended_at, passed, master_loss [Pa], standard_loss [Pa], ratio,
                         sensitivity, record_id
        State, StateDetail, TestsToday, RejectsToday

A variable with a unit carries the standard ``EngineeringUnits`` property (EUInformation, UNECE
codes where the unit has one). Browse names are the ids, display names the names as
configured. Every variable is read-only; a value's source time stamp is the record's time; a
field the latest record lacks (no part id, no temperature) reads as null with BadNoData.

It is fed like every other sink, from the journal behind a cursor, so it shows what the journal
holds. At each start it replays the last ``replay`` records per kind (default 20000) to fill
the latest values and today's counters (a day in ``timezone``, default UTC; a site with more
results per day than ``replay`` shows a short count until midnight).

Security: ``cert_file`` + ``key_file`` (the server's certificate, PEM or DER) open a
Basic256Sha256 SignAndEncrypt endpoint, and then ``trusted_clients_dir`` (required) holds the
certificates of the client applications allowed to connect. ``allow_anonymous = true`` adds an
unencrypted endpoint anyone who reaches the port can read; it is off unless configured. The
default address is loopback (``opc.tcp://127.0.0.1:4840/leakfleet``).
"""

from __future__ import annotations

import asyncio
import contextlib
import ipaddress
import logging
import urllib.parse
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.errors import ConfigError
from gateway.records import (
    AlarmEvent,
    CalibrationEvent,
    Record,
    StationStatus,
    TestResult,
    Verdict,
)
from gateway.sinks import SinkContext, register_sink
from gateway.sinks.forwarder import ForwarderOptions, JournalForwarder, SinkUnavailable
from gateway.sinks.topics import slug
from gateway.store.journal import Journal, Kind

__all__ = ["OpcUaOptions", "OpcUaServer", "make_opcua", "unit_id"]

log = logging.getLogger(__name__)
DEFAULT_URL = "opc.tcp://127.0.0.1:4840/leakfleet"
UNECE_NS = "http://www.opcfoundation.org/UA/units/un/cefact"
SHOWN_KINDS: tuple[Kind, ...] = ("result", "calibration", "status")  # what the space shows
_KEYS = ("url", "cert_file", "key_file", "trusted_clients_dir", "allow_anonymous", "replay",
         "timezone")

# unit → (UNECE Rec. 20 common code or None, description)
UNITS: dict[str, tuple[str | None, str]] = {
    "Pa": ("PAL", "pascal"),
    "s": ("SEC", "second"),
    "°C": ("CEL", "degree Celsius"),
    "sccm": (None, "standard cubic centimetre per minute"),
    "sccm/Pa": (None, "standard cubic centimetre per minute per pascal"),
}


def unit_id(code: str) -> int:
    """OPC UA Part 8's UnitId for a UNECE common code: its characters packed, 8 bits each."""
    out = 0
    for ch in code:
        out = (out << 8) | ord(ch)
    return out


@dataclass(frozen=True)
class Var:
    name: str
    kind: str  # VariantType name
    unit: str | None = None


RESULT_VARS = (
    Var("ended_at", "DateTime"), Var("cycle", "Int64"), Var("program", "String"),
    Var("verdict", "String"), Var("part_id", "String"), Var("leak_rate", "Double", "sccm"),
    Var("reject_limit", "Double", "sccm"), Var("pressure_loss", "Double", "Pa"),
    Var("test_pressure", "Double", "Pa"), Var("fill_time", "Double", "s"),
    Var("stabilise_time", "Double", "s"), Var("test_time", "Double", "s"),
    Var("temperature", "Double", "°C"), Var("record_id", "String"),
)
CALIBRATION_VARS = (
    Var("ended_at", "DateTime"), Var("passed", "Boolean"), Var("master_loss", "Double", "Pa"),
    Var("standard_loss", "Double", "Pa"), Var("ratio", "Double"),
    Var("sensitivity", "Double", "sccm/Pa"), Var("record_id", "String"),
)
STATION_VARS = (Var("State", "String"), Var("StateDetail", "String"),
                Var("TestsToday", "UInt32"), Var("RejectsToday", "UInt32"))


def result_values(r: TestResult) -> dict[str, object]:
    return {"ended_at": r.ended_at, "cycle": r.cycle, "program": r.program,
            "verdict": r.verdict.value, "part_id": r.part_id, "leak_rate": r.leak_rate_sccm,
            "reject_limit": r.reject_limit_sccm, "pressure_loss": r.pressure_loss_pa,
            "test_pressure": r.test_pressure_pa, "fill_time": r.fill_s,
            "stabilise_time": r.stabilise_s, "test_time": r.test_s,
            "temperature": r.temperature_c, "record_id": r.record_id}


def calibration_values(c: CalibrationEvent) -> dict[str, object]:
    return {"ended_at": c.ended_at, "passed": c.passed, "master_loss": c.master_loss_pa,
            "standard_loss": c.standard_loss_pa, "ratio": c.ratio,
            "sensitivity": c.sensitivity, "record_id": c.record_id}


@dataclass(frozen=True)
class OpcUaOptions:
    url: str
    cert_file: str | None
    key_file: str | None
    trusted_clients_dir: str | None
    allow_anonymous: bool
    replay: int
    timezone: str

    @classmethod
    def from_options(cls, options: Mapping[str, Any]) -> OpcUaOptions:
        unknown = sorted(set(options) - set(_KEYS) - set(ForwarderOptions.KEYS))
        if unknown:
            raise ValueError(f"unknown key(s) {', '.join(unknown)}; expected {', '.join(_KEYS)}")
        url = str(options.get("url", DEFAULT_URL))
        parts = urllib.parse.urlsplit(url)
        try:
            port = parts.port
        except ValueError:
            port = None
        if parts.scheme != "opc.tcp" or not parts.hostname or port is None:
            raise ValueError(f"url {url!r}: expected opc.tcp://host:port[/path]")
        text: dict[str, str | None] = {}
        for key in ("cert_file", "key_file", "trusted_clients_dir"):
            value = options.get(key)
            if value is not None and (not isinstance(value, str) or not value.strip()):
                raise ValueError(f"{key} must be a non-empty path, got {value!r}")
            text[key] = value
        anonymous = options.get("allow_anonymous", False)
        if not isinstance(anonymous, bool):
            raise ValueError(f"allow_anonymous must be true or false, got {anonymous!r}")
        if (text["cert_file"] is None) != (text["key_file"] is None):
            raise ValueError("cert_file and key_file go together (the server's certificate)")
        if text["cert_file"] and not text["trusted_clients_dir"]:
            raise ValueError("trusted_clients_dir is required with cert_file: the certificates "
                             "of the client applications allowed to connect")
        if not text["cert_file"] and not anonymous:
            raise ValueError("set cert_file, key_file and trusted_clients_dir (Basic256Sha256 "
                             "SignAndEncrypt), or allow_anonymous = true for an open endpoint")
        replay = options.get("replay", 20_000)
        if isinstance(replay, bool) or not isinstance(replay, int) or not 0 <= replay <= 10**7:
            raise ValueError(f"replay must be an integer from 0 to 10000000, got {replay!r}")
        tz = str(options.get("timezone", "UTC"))
        try:
            ZoneInfo(tz)
        except (ZoneInfoNotFoundError, ValueError):
            raise ValueError(f"timezone {tz!r} is not a known IANA time zone") from None
        return cls(url, text["cert_file"], text["key_file"], text["trusted_clients_dir"],
                   anonymous, replay, tz)

    def loopback(self) -> bool:
        host = urllib.parse.urlsplit(self.url).hostname or ""
        try:
            return ipaddress.ip_address(host).is_loopback
        except ValueError:
            return host == "localhost"


class OpcUaServer:
    """``SinkClient`` whose remote side is our own OPC UA server: ``send`` writes values."""

    def __init__(self, opts: OpcUaOptions, ctx: SinkContext, sink_name: str) -> None:
        self.opts = opts
        self.ctx = ctx
        self.sink_name = sink_name
        self.kinds: tuple[Kind, ...] = SHOWN_KINDS
        self.tz = ZoneInfo(opts.timezone)
        self.site_id = slug(ctx.site)
        self._server: Any = None
        self._idx = 0
        self._vars: dict[str, Any] = {}  # node id text → Node
        self._today: dict[str, tuple[date, int, int]] = {}  # station → (day, tests, rejects)
        self._applied: dict[tuple[str, str], int] = {}  # (station, kind) → newest seq shown
        self._counted: dict[str, set[int]] = {}  # station → seqs of today's results counted

    def describe(self) -> str:
        return self.opts.url

    def node_id(self, station: str, *path: str) -> str:
        line = self.ctx.stations.get(station, "_")
        return "/".join((self.site_id, line, station, *path))

    async def connect(self) -> None:
        if self._server is not None:
            return
        from asyncua import Server

        ua = _ua()
        server = Server()
        await server.init()
        server.set_endpoint(self.opts.url)
        server.set_server_name(f"leakfleet gateway {self.ctx.gateway_id}")
        await server.set_application_uri(f"urn:leakfleet:{self.ctx.gateway_id}:opcua")
        policies = []
        if self.opts.cert_file and self.opts.key_file:
            policies.append(ua.SecurityPolicyType.Basic256Sha256_SignAndEncrypt)
            try:
                await server.load_certificate(self.opts.cert_file)
                await server.load_private_key(self.opts.key_file)
                server.set_certificate_validator(await self._validator())
            except (OSError, ValueError) as exc:
                raise ConfigError(f"sink {self.sink_name}: certificate files: {exc}") from exc
        if self.opts.allow_anonymous:
            policies.append(ua.SecurityPolicyType.NoSecurity)
            if not self.opts.loopback():
                log.warning("sink %s: allow_anonymous on %s: anyone who reaches the port reads "
                            "the data unencrypted", self.sink_name, self.opts.url)
        server.set_security_policy(policies)
        server.set_identity_tokens([ua.AnonymousIdentityToken])  # the channel authenticates
        self._idx = await server.register_namespace(f"urn:leakfleet:{self.ctx.gateway_id}")
        await self._build(server)
        try:
            await server.start()
        except OSError as exc:
            raise SinkUnavailable(f"cannot listen on {self.opts.url}: {exc}") from None
        self._server = server

    async def _validator(self) -> Any:
        from asyncua.crypto.truststore import TrustStore
        from asyncua.crypto.validator import CertificateValidator, CertificateValidatorOptions

        folder = Path(str(self.opts.trusted_clients_dir))
        if not folder.is_dir():
            raise ValueError(f"trusted_clients_dir {str(folder)!r} is not a directory")
        store = TrustStore([folder], [])
        await store.load()
        flags = CertificateValidatorOptions.TRUSTED | CertificateValidatorOptions.TIME_RANGE | (
            CertificateValidatorOptions.PEER_CLIENT)
        return CertificateValidator(flags, store)

    async def _build(self, server: Any) -> None:
        ua = _ua()
        idx = self._idx

        async def obj(parent: Any, nid: str, browse: str, display: str) -> Any:
            node = await parent.add_object(ua.NodeId(nid, idx), ua.QualifiedName(browse, idx))
            await node.write_attribute(ua.AttributeIds.DisplayName,
                                       ua.DataValue(ua.Variant(ua.LocalizedText(display))))
            return node

        async def var(parent: Any, nid: str, v: Var) -> None:
            vtype = getattr(ua.VariantType, v.kind)
            node = await parent.add_variable(
                ua.NodeId(nid, idx), ua.QualifiedName(v.name, idx),
                ua.Variant(None, ua.VariantType.Null), datatype=ua.NodeId(vtype.value))
            if v.unit:
                code, description = UNITS[v.unit]
                eu = ua.EUInformation(NamespaceUri=UNECE_NS,
                                      UnitId=unit_id(code) if code else -1,
                                      DisplayName=ua.LocalizedText(v.unit),
                                      Description=ua.LocalizedText(description))
                await node.add_property(idx, "EngineeringUnits", eu,
                                        datatype=ua.NodeId(ua.ObjectIds.EUInformation))
            self._vars[nid] = node

        root = await obj(server.nodes.objects, "LeakFleet", "LeakFleet", "LeakFleet")
        site = await obj(root, self.site_id, self.site_id, self.ctx.site)
        lines: dict[str, Any] = {}
        for station, line in sorted(self.ctx.stations.items()):
            if line not in lines:
                lines[line] = await obj(site, f"{self.site_id}/{line}", line, line)
            base = self.node_id(station)
            node = await obj(lines[line], base, station, station)
            for v in STATION_VARS:
                await var(node, f"{base}/{v.name}", v)
            for group, defs in (("LastResult", RESULT_VARS),
                                ("LastCalibration", CALIBRATION_VARS)):
                holder = await obj(node, f"{base}/{group}", group, group)
                for v in defs:
                    await var(holder, f"{base}/{group}/{v.name}", v)

    async def _write(self, nid: str, kind: str, value: object, at: datetime) -> None:
        ua = _ua()
        node = self._vars.get(nid)
        if node is None:  # a station not (or no longer) configured: nowhere to show it
            return
        stamp = at.astimezone(UTC)
        if value is None:  # the record has no such value: null with BadNoData, not a stale one
            data = ua.DataValue(ua.Variant(None, ua.VariantType.Null), SourceTimestamp=stamp,
                                StatusCode=ua.StatusCode(ua.StatusCodes.BadNoData))
        else:
            data = ua.DataValue(ua.Variant(value, getattr(ua.VariantType, kind)),
                                SourceTimestamp=stamp)
        await node.write_value(data)

    async def send(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        if self._server is None:
            raise SinkUnavailable("OPC UA server not started")
        for seq, record in rows:
            if isinstance(record, AlarmEvent):
                continue  # not in the shown kinds: the address space has no alarm nodes
            if isinstance(record, TestResult):
                await self._count(seq, record)
            key = (record.station, record.kind)
            if seq <= self._applied.get(key, 0):
                continue  # older than what is shown (the forwarder may send new ones first)
            self._applied[key] = seq
            await self.apply(record)

    async def apply(self, record: Record) -> None:
        if isinstance(record, TestResult):
            for v in RESULT_VARS:
                await self._write(self.node_id(record.station, "LastResult", v.name), v.kind,
                                  result_values(record)[v.name], record.ended_at)
        elif isinstance(record, CalibrationEvent):
            for v in CALIBRATION_VARS:
                await self._write(self.node_id(record.station, "LastCalibration", v.name),
                                  v.kind, calibration_values(record)[v.name], record.ended_at)
        elif isinstance(record, StationStatus):
            await self._write(self.node_id(record.station, "State"), "String",
                              record.state.value, record.at)
            await self._write(self.node_id(record.station, "StateDetail"), "String",
                              record.detail, record.at)

    async def _count(self, seq: int, r: TestResult) -> None:
        """Today's tests and rejects; each journal row once, in whatever order it comes."""
        today = datetime.now(self.tz).date()
        day, tests, rejects = self._today.get(r.station, (today, 0, 0))
        counted = self._counted.setdefault(r.station, set())
        if day != today:
            tests, rejects = 0, 0
            counted.clear()
        if r.ended_at.astimezone(self.tz).date() == today and seq not in counted:
            counted.add(seq)
            tests += 1
            rejects += r.verdict in (Verdict.REJECT, Verdict.GROSS)
        self._today[r.station] = (today, tests, rejects)
        await self._write(self.node_id(r.station, "TestsToday"), "UInt32", tests, r.ended_at)
        await self._write(self.node_id(r.station, "RejectsToday"), "UInt32", rejects, r.ended_at)

    async def close(self, *, graceful: bool) -> None:
        server, self._server = self._server, None
        self._vars, self._today, self._applied, self._counted = {}, {}, {}, {}
        if server is not None:
            with contextlib.suppress(OSError, asyncio.CancelledError):
                await server.stop()


def _ua() -> Any:
    """asyncua's ``ua`` module, loaded on first use (its types are NewTypes mypy can't mix)."""
    import importlib

    return importlib.import_module("asyncua.ua")


class OpcUaForwarder(JournalForwarder):
    """Starts each run ``replay`` records back, so the server shows the latest values."""

    async def run_with(self, journal: Journal, stop: asyncio.Event) -> None:
        assert isinstance(self.client, OpcUaServer)
        replay = self.client.opts.replay
        for kind in self.client.kinds:
            top = await asyncio.to_thread(journal.max_seq, kind)
            await asyncio.to_thread(journal.set_cursor, self.name, kind, max(0, top - replay))
        await super().run_with(journal, stop)


def make_opcua(name: str, options: Mapping[str, Any], ctx: SinkContext) -> JournalForwarder:
    """``[sinks.<name>] type = "opcua"``: validate options now, serve when run."""
    import importlib.util

    opts = OpcUaOptions.from_options(options)
    if importlib.util.find_spec("asyncua") is None:
        raise ValueError("the OPC UA server needs asyncua: pip install 'leakfleet[opcua]'")
    slug(ctx.site)  # the site's node id
    fwd = ForwarderOptions.from_options(options)
    return OpcUaForwarder(name, OpcUaServer(opts, ctx, name), fwd)


register_sink("opcua")(make_opcua)
