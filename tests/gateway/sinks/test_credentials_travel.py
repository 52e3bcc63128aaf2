"""Credentials never follow a redirect, and travelling in clear text is said out loud."""

from __future__ import annotations

import http.server
import threading
from collections.abc import Iterator
from typing import Any, ClassVar

import pytest

from gateway.influxdb.http import InfluxHttp, InfluxHttpError, InfluxTarget, clear_text_warning


class _Spy(http.server.BaseHTTPRequestHandler):
    seen: ClassVar[list[tuple[str, str | None]]] = []

    def do_GET(self) -> None:
        _Spy.seen.append((self.path, self.headers.get("Authorization")))
        if self.path.startswith("/ping"):
            self.send_response(307)
            self.send_header("Location", f"http://127.0.0.1:{self.server.server_port}/stolen")
            self.end_headers()
            return
        self.send_response(204)
        self.end_headers()

    def log_message(self, *args: Any) -> None:
        pass


@pytest.fixture()
def server() -> Iterator[int]:
    srv = http.server.ThreadingHTTPServer(("127.0.0.1", 0), _Spy)
    threading.Thread(target=srv.serve_forever, daemon=True).start()
    try:
        yield srv.server_port
    finally:
        srv.shutdown()


def _target(port: int) -> InfluxTarget:
    from gateway.influxdb.http import parse_influx_url

    return parse_influx_url(f"influxdb2://127.0.0.1:{port}?org=o&bucket=b")


def test_a_redirect_is_not_followed_with_the_token(server: int) -> None:
    _Spy.seen.clear()
    http_ = InfluxHttp(_target(server), token="s3cret-token")
    with pytest.raises(InfluxHttpError, match="not followed"):
        http_.ping()
    assert [p for p, _ in _Spy.seen] == ["/ping"]  # "/stolen" never asked for


def test_clear_text_warning_only_off_this_machine() -> None:
    class T:
        tls = False
        host = "db.plant.example"

    assert "clear text" in (clear_text_warning(T(), True) or "")
    assert clear_text_warning(T(), False) is None
    T.host = "127.0.0.1"
    assert clear_text_warning(T(), True) is None
    T.tls, T.host = True, "db.plant.example"
    assert clear_text_warning(T(), True) is None
