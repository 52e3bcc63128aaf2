"""InfluxDB sink: journalled records as line protocol (see ``lineprotocol`` for the schema).

Two write paths, one encoder:
- ``influxdb://host:8086/db`` — the v1 HTTP API, ``POST /write?db=..&precision=ns``, served by
  InfluxDB 1.x, by 2.x (compatibility endpoint with a DBRP mapping) and by 3 Core. HTTP 204 is
  the acknowledgement the forwarder waits for. Optional 1.x auth: ``username`` in the URL or
  config, password from ``LEAKFLEET_INFLUX_PASSWORD`` or ``password_file``.
- ``influxdb2://host:8086?org=..&bucket=..`` — ``influxdb-client``'s synchronous v2 write API
  with a token from ``LEAKFLEET_INFLUX_TOKEN`` or ``token_file``.

A point's identity is its measurement, tags and timestamp (the record's own time), so a batch
re-sent after a lost acknowledgement overwrites itself: each record is in InfluxDB exactly once.

    [sinks.influx]
    type = "influxdb"
    url = "influxdb://historian.example:8086/leakfleet"
    create_database = true        # v1: CREATE DATABASE on connect (idempotent), default true
"""

from __future__ import annotations

import asyncio
import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from gateway.errors import ConfigError
from gateway.influxdb.http import (
    PASSWORD_ENV,
    TOKEN_ENV,
    InfluxHttp,
    InfluxHttpError,
    InfluxTarget,
    clear_text_warning,
    parse_influx_url,
)
from gateway.influxdb.lineprotocol import encode
from gateway.records import Record
from gateway.sinks import SinkContext, register_sink
from gateway.sinks.forwarder import (
    ForwarderOptions,
    JournalForwarder,
    SinkRefused,
    SinkUnavailable,
    read_secret,
)
from gateway.sinks.influx_parts import part_summary_lines
from gateway.store.journal import KINDS, Kind

__all__ = ["InfluxClient", "InfluxOptions", "make_influx"]

log = logging.getLogger(__name__)
#: HTTP answers that judge the data, not the server's state: 400 bad request (unparsable
#: point, time out of range), 413 too large, 422 unprocessable (v2: outside retention)
_REFUSED = (400, 413, 422)

_KEYS = ("url", "username", "password_file", "token_file", "ca_file", "create_database",
         "kinds", "timeout_s")


@dataclass(frozen=True)
class InfluxOptions:
    target: InfluxTarget
    password_file: str | None
    token_file: str | None
    ca_file: str | None
    create_database: bool
    kinds: tuple[Kind, ...]
    timeout_s: float

    @classmethod
    def from_options(cls, options: Mapping[str, Any]) -> InfluxOptions:
        unknown = sorted(set(options) - set(_KEYS) - set(ForwarderOptions.KEYS))
        secret_keys = {"password", "token"} & set(unknown)
        if secret_keys:
            raise ValueError(
                f"{'/'.join(sorted(secret_keys))} does not belong in the config; set "
                f"{TOKEN_ENV} / {PASSWORD_ENV} or token_file / password_file"
            )
        if unknown:
            raise ValueError(f"unknown key(s) {', '.join(unknown)}; expected {', '.join(_KEYS)}")
        if "url" not in options:
            raise ValueError("url is required (influxdb://host:port/db or influxdb2://...)")
        target = parse_influx_url(str(options["url"]))
        username = options.get("username")
        if username is not None:
            if target.version == 2:
                raise ValueError("username is for influxdb:// (1.x); 2.x uses a token")
            if not isinstance(username, str) or not username:
                raise ValueError(f"username must be a non-empty string, got {username!r}")
            target = InfluxTarget(1, target.host, target.port, target.tls, target.database,
                                  target.retention_policy, username=username)
        create = options.get("create_database", True)
        if not isinstance(create, bool):
            raise ValueError(f"create_database must be true or false, got {create!r}")
        timeout = options.get("timeout_s", 10.0)
        if isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or timeout <= 0:
            raise ValueError(f"timeout_s must be a positive number, got {timeout!r}")
        kinds = options.get("kinds")
        if kinds is not None and (
            not isinstance(kinds, list) or not kinds or any(k not in KINDS for k in kinds)
        ):
            raise ValueError(f"kinds must be a list drawn from {', '.join(KINDS)}, got {kinds!r}")
        return cls(
            target=target,
            password_file=_text(options, "password_file"),
            token_file=_text(options, "token_file"),
            ca_file=_text(options, "ca_file"),
            create_database=create,
            kinds=KINDS if kinds is None else tuple(k for k in KINDS if k in kinds),
            timeout_s=float(timeout),
        )


def _text(options: Mapping[str, Any], key: str) -> str | None:
    value = options.get(key)
    if value is not None and (not isinstance(value, str) or not value):
        raise ValueError(f"{key} must be a non-empty string, got {value!r}")
    return value


class InfluxClient:
    """``SinkClient`` for one InfluxDB (v1 HTTP API, or v2 writes through influxdb-client)."""

    def __init__(self, opts: InfluxOptions, ctx: SinkContext, sink_name: str) -> None:
        self.opts = opts
        self.ctx = ctx
        self.kinds = opts.kinds
        self.sink_name = sink_name
        self._http: InfluxHttp | None = None
        self._v2: Any = None  # (InfluxDBClient, WriteApi)
        self._db_checked = False
        # a missing secret is a config mistake: say so before the gateway starts (--check)
        if opts.target.version == 2 and not read_secret(TOKEN_ENV, opts.token_file,
                                                        f"sink {sink_name}"):
            raise ConfigError(f"sink {sink_name}: influxdb2 needs a token: set {TOKEN_ENV} or "
                              "token_file")

    def describe(self) -> str:
        return self.opts.target.describe()

    def _prepare(self) -> InfluxHttp:
        if self._http is not None:
            return self._http
        what = f"sink {self.sink_name}"
        t = self.opts.target
        token = password = None
        if t.version == 2:
            token = read_secret(TOKEN_ENV, self.opts.token_file, what)
            if not token:
                raise ConfigError(f"{what}: influxdb2 needs a token: set {TOKEN_ENV} or token_file")
        else:
            password = read_secret(PASSWORD_ENV, self.opts.password_file, what)
        warning = clear_text_warning(t, bool(token or password))
        if warning:
            log.warning("sink %s: %s", self.sink_name, warning)
        self._http = InfluxHttp(t, token=token, password=password,
                                timeout_s=self.opts.timeout_s, ca_file=self.opts.ca_file)
        return self._http

    async def connect(self) -> None:
        http = self._prepare()
        try:
            await asyncio.to_thread(http.ping)
        except InfluxHttpError as exc:
            raise SinkUnavailable(f"{self.describe()}: {exc}") from None
        if http.target.version == 1 and self.opts.create_database and not self._db_checked:
            try:
                await asyncio.to_thread(
                    http.query, f'CREATE DATABASE "{_ident(http.target.database)}"', database=False
                )
            except InfluxHttpError as exc:
                if exc.status == 0:
                    raise SinkUnavailable(f"{self.describe()}: {exc}") from None
                log.warning("sink %s: cannot create database %s (%s); writing anyway",
                            self.sink_name, http.target.database, exc)
            self._db_checked = True

    async def send(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        body = encode(rows, site=self.ctx.site, lines=self.ctx.stations)
        if kind == "result":
            # the parts these results belong to, as the journal now judges them (first-pass
            # yield without reading every test back: gateway.sinks.influx_parts)
            summary = await asyncio.to_thread(part_summary_lines, self.ctx.store_url, rows,
                                              site=self.ctx.site)
            if summary:
                body = "\n".join([body, *summary])
        http = self._prepare()
        try:
            if http.target.version == 2:
                await asyncio.to_thread(self._write_v2, body)
            else:
                await asyncio.to_thread(http.write, body)
        except InfluxHttpError as exc:
            if exc.status in _REFUSED:
                # the server read the batch and will never take it (a timestamp outside its
                # range, a malformed point, too large): retrying cannot help
                raise SinkRefused(f"{self.describe()}: {exc}") from None
            hint = ""
            if exc.status in (401, 403):
                hint = f" (check {TOKEN_ENV if http.target.version == 2 else PASSWORD_ENV})"
            raise SinkUnavailable(f"{self.describe()} refused the write: {exc}{hint}") from None

    def _write_v2(self, body: str) -> None:
        """Blocking: one synchronous v2 write (influxdb-client), errors as InfluxHttpError."""
        from influxdb_client import InfluxDBClient, WriteOptions
        from influxdb_client.client.write_api import WriteType
        from influxdb_client.domain.write_precision import WritePrecision
        from influxdb_client.rest import ApiException

        t = self.opts.target
        assert self._http is not None
        if self._v2 is None:
            client = InfluxDBClient(
                url=t.base_url, token=self._http.token or "", org=t.org or "",
                timeout=int(self.opts.timeout_s * 1000), ssl_ca_cert=self.opts.ca_file,
                retries=False,
            )
            api = client.write_api(write_options=WriteOptions(
                write_type=WriteType.synchronous, max_close_wait=2_000))
            self._v2 = (client, api)
        _, api = self._v2
        try:
            api.write(bucket=t.database, org=t.org, record=body, write_precision=WritePrecision.NS)
        except ApiException as exc:
            raise InfluxHttpError(int(exc.status or 0), f"HTTP {exc.status} {exc.reason}") from None
        except Exception as exc:  # urllib3 connection errors and the like: no answer
            raise InfluxHttpError(0, f"no answer: {type(exc).__name__}") from None

    async def close(self, *, graceful: bool) -> None:
        v2, self._v2 = self._v2, None
        if v2 is not None:
            client, api = v2
            await asyncio.to_thread(api.close)
            await asyncio.to_thread(client.close)


def _ident(name: str) -> str:
    return name.replace("\\", "\\\\").replace('"', '\\"')


def make_influx(name: str, options: Mapping[str, Any], ctx: SinkContext) -> JournalForwarder:
    """``[sinks.<name>] type = "influxdb"``: validate options now, connect when run."""
    opts = InfluxOptions.from_options(options)
    return JournalForwarder(name, InfluxClient(opts, ctx, name),
                            ForwarderOptions.from_options(options))


register_sink("influxdb")(make_influx)
register_sink("influx")(make_influx)
