"""The influxdb2:// paths, seen from a recording HTTP peer on loopback (no 2.x server on the
build machine: Debian ships 1.6, which has no v2 API). What goes on the wire: the v2 write
endpoint with org, bucket and ns precision, the token in an Authorization header only."""

from __future__ import annotations

import json
import logging
import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any, ClassVar

import pytest

from gateway.influxdb.http import TOKEN_ENV
from gateway.influxdb.lineprotocol import encode
from gateway.sinks.influx import InfluxClient, InfluxOptions
from gateway.store.influx import open_influx_store
from tests.integration.sinks_data import ctx, shift

TOKEN = "tok-3e1d-northmere-write"


class Recorder(BaseHTTPRequestHandler):
    seen: ClassVar[list[dict[str, Any]]] = []

    def _record(self) -> bytes:
        length = int(self.headers.get("Content-Length") or 0)
        body = self.rfile.read(length) if length else b""
        self.seen.append({"method": self.command, "path": self.path,
                          "headers": dict(self.headers), "body": body})
        return body

    def do_GET(self) -> None:
        self._record()
        self.send_response(204)
        self.end_headers()

    def do_HEAD(self) -> None:
        self.do_GET()

    def do_POST(self) -> None:
        self._record()
        if self.path.startswith("/query"):
            out = json.dumps({"results": [{"statement_id": 0}]}).encode()
            self.send_response(200)
            self.send_header("Content-Type", "application/json")
            self.send_header("Content-Length", str(len(out)))
            self.end_headers()
            self.wfile.write(out)
            return
        self.send_response(204)
        self.end_headers()

    def log_message(self, *args: Any) -> None:
        pass


@pytest.fixture
def peer() -> Iterator[tuple[int, list[dict[str, Any]]]]:
    Recorder.seen = []
    server = ThreadingHTTPServer(("127.0.0.1", 0), Recorder)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield int(server.server_address[1]), Recorder.seen
    server.shutdown()
    server.server_close()


async def test_v2_write(peer: tuple[int, list[dict[str, Any]]], monkeypatch: pytest.MonkeyPatch,
                        caplog: pytest.LogCaptureFixture) -> None:
    caplog.set_level(logging.DEBUG)
    port, seen = peer
    monkeypatch.setenv(TOKEN_ENV, TOKEN)
    opts = InfluxOptions.from_options(
        {"url": f"influxdb2://127.0.0.1:{port}?org=northmere&bucket=leak"})
    client = InfluxClient(opts, ctx(), "influx")
    rows = list(enumerate(shift(1, 3), start=1))
    await client.connect()
    await client.send("result", rows)
    await client.close(graceful=True)
    write = next(r for r in seen if r["path"].startswith("/api/v2/write"))
    assert "org=northmere" in write["path"] and "bucket=leak" in write["path"]
    assert "precision=ns" in write["path"]
    assert write["headers"]["Authorization"] == f"Token {TOKEN}"
    assert write["body"].decode() == encode(rows, site="northmere", lines=ctx().stations)
    assert TOKEN not in caplog.text


def test_v2_store_queries_with_token(peer: tuple[int, list[dict[str, Any]]],
                                     monkeypatch: pytest.MonkeyPatch) -> None:
    port, seen = peer
    monkeypatch.setenv(TOKEN_ENV, TOKEN)
    store = open_influx_store(f"influxdb2://127.0.0.1:{port}?org=northmere&bucket=leak")
    assert store.results().empty
    query = next(r for r in seen if r["path"].startswith("/query"))
    assert query["headers"]["Authorization"] == f"Token {TOKEN}"
    assert b"db=leak" in query["body"] and TOKEN.encode() not in query["body"]
