"""InfluxDB URLs and the v1 HTTP API (``/ping``, ``/write``, ``/query``), shared by the sink and
the query store. Blocking stdlib ``urllib``: callers on the event loop use ``asyncio.to_thread``.

URLs (the forms below):
    influxdb://[user@]host:8086/database[?rp=autogen&tls=true]    v1 API; password from
                                                                  LEAKFLEET_INFLUX_PASSWORD
    influxdb2://host:8086?org=ORG&bucket=BUCKET[&tls=true]        token from LEAKFLEET_INFLUX_TOKEN
A 2.x server answers v1 ``/query`` (and ``/write``) for a bucket through a DBRP mapping, with
the token in an ``Authorization: Token`` header; that is how the query store reads 2.x.
Secrets never appear in a URL we build, an error message or a log line.
"""

from __future__ import annotations

import base64
import json
import urllib.error
import urllib.parse
import urllib.request
from dataclasses import dataclass, field
from typing import Any

__all__ = [
    "PASSWORD_ENV",
    "TOKEN_ENV",
    "InfluxHttp",
    "InfluxHttpError",
    "InfluxTarget",
    "parse_influx_url",
]

TOKEN_ENV = "LEAKFLEET_INFLUX_TOKEN"
PASSWORD_ENV = "LEAKFLEET_INFLUX_PASSWORD"


class InfluxHttpError(Exception):
    """A failed request: ``status`` is the HTTP status (0: no answer at all)."""

    def __init__(self, status: int, message: str) -> None:
        super().__init__(message)
        self.status = status


@dataclass(frozen=True)
class InfluxTarget:
    version: int  # 1 or 2
    host: str
    port: int
    tls: bool
    database: str  # v1 database, or the v2 bucket (its DBRP-mapped name for v1 queries)
    retention_policy: str | None = None
    org: str | None = None
    username: str | None = None

    @property
    def base_url(self) -> str:
        return f"{'https' if self.tls else 'http'}://{self.host}:{self.port}"

    def describe(self) -> str:
        scheme = "influxdb2" if self.version == 2 else "influxdb"
        where = f"{self.host}:{self.port}"
        if self.version == 2:
            return f"{scheme}://{where} (org {self.org}, bucket {self.database})"
        return f"{scheme}://{where}/{self.database}"


def parse_influx_url(url: str) -> InfluxTarget:
    """Validate an ``influxdb://`` / ``influxdb2://`` URL (ValueError says what is expected)."""
    parts = urllib.parse.urlsplit(url)
    expected = "influxdb://host:port/database or influxdb2://host:port?org=..&bucket=.."
    if parts.password is not None:  # first, so no later message echoes the secret
        raise ValueError(
            f"put no secret in the URL; set {TOKEN_ENV} (2.x) or {PASSWORD_ENV} (1.x) instead"
        )
    if parts.scheme not in ("influxdb", "influxdb2") or not parts.hostname:
        raise ValueError(f"{url!r}: expected {expected}")
    query = dict(urllib.parse.parse_qsl(parts.query, keep_blank_values=True))
    tls = query.pop("tls", "false").lower() in ("1", "true", "yes")
    try:
        port = parts.port or 8086
    except ValueError as exc:
        raise ValueError(f"{url!r}: bad port") from exc
    if parts.scheme == "influxdb":
        database = parts.path.strip("/")
        if not database or "/" in database:
            raise ValueError(f"{url!r}: name one database after the port (…:8086/leakfleet)")
        rp = query.pop("rp", None) or None
        if query:
            raise ValueError(f"{url!r}: unknown parameter(s) {', '.join(sorted(query))}")
        return InfluxTarget(1, parts.hostname, port, tls, database, rp,
                            username=parts.username or None)
    org, bucket = query.pop("org", ""), query.pop("bucket", "")
    if not org or not bucket or parts.path.strip("/"):
        raise ValueError(f"{url!r}: expected influxdb2://host:port?org=ORG&bucket=BUCKET")
    if query:
        raise ValueError(f"{url!r}: unknown parameter(s) {', '.join(sorted(query))}")
    return InfluxTarget(2, parts.hostname, port, tls, bucket, org=org)


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    """Never follow a redirect: urllib would send the Authorization header to wherever the
    server points, any host included."""

    def redirect_request(self, req: Any, fp: Any, code: int, msg: str, headers: Any,
                         newurl: str) -> None:
        return None


def clear_text_warning(target: Any, has_credentials: bool) -> str | None:
    """A warning when credentials would travel unencrypted to another machine."""
    import ipaddress

    if not has_credentials or target.tls:
        return None
    host = str(getattr(target, "host", "") or "")
    try:
        loopback = host == "localhost" or ipaddress.ip_address(host).is_loopback
    except ValueError:
        loopback = False
    if loopback:
        return None
    return (f"credentials for {host} travel in clear text over http://; use https:// "
            "(influxdbs:// / influxdb2s://) or keep the server on this machine")


@dataclass
class InfluxHttp:
    """The v1 API of one server. ``token`` (2.x) or ``username``/``password`` (1.x auth)."""

    target: InfluxTarget
    token: str | None = None
    password: str | None = None
    timeout_s: float = 10.0
    ca_file: str | None = None
    _ssl: Any = field(default=None, repr=False)

    def _headers(self) -> dict[str, str]:
        headers = {"Accept": "application/json"}
        if self.token:
            headers["Authorization"] = f"Token {self.token}"
        elif self.target.username and self.password is not None:
            pair = f"{self.target.username}:{self.password}".encode()
            headers["Authorization"] = "Basic " + base64.b64encode(pair).decode()
        return headers

    def _context(self) -> Any:
        if self.target.tls and self._ssl is None:
            import ssl

            self._ssl = ssl.create_default_context(cafile=self.ca_file)
        return self._ssl

    def request(
        self, method: str, path: str, params: dict[str, str], body: bytes | None = None
    ) -> tuple[int, bytes]:
        url = f"{self.target.base_url}{path}"
        if params:
            url += "?" + urllib.parse.urlencode(params)
        headers = self._headers()
        if body is not None and path == "/write":
            headers["Content-Type"] = "text/plain; charset=utf-8"
        elif body is not None:
            headers["Content-Type"] = "application/x-www-form-urlencoded"
        req = urllib.request.Request(url, data=body, method=method, headers=headers)
        opener = urllib.request.build_opener(
            urllib.request.HTTPSHandler(context=self._context()), _NoRedirect()
        )
        try:
            with opener.open(req, timeout=self.timeout_s) as r:
                return int(r.status), r.read()
        except urllib.error.HTTPError as exc:
            if 300 <= exc.code < 400:
                where = exc.headers.get("Location", "elsewhere") if exc.headers else "elsewhere"
                raise InfluxHttpError(exc.code, f"HTTP {exc.code}: the server redirects to "
                                      f"{where}; not followed (credentials would go along); "
                                      "configure the final address") from None
            detail = _error_text(exc.read())
            raise InfluxHttpError(exc.code, f"HTTP {exc.code} {detail}".strip()) from None
        except (urllib.error.URLError, OSError) as exc:
            reason = getattr(exc, "reason", exc)
            raise InfluxHttpError(0, f"no answer: {reason}") from None

    def ping(self) -> None:
        self.request("GET", "/ping", {})

    def write(self, body: str) -> None:
        params = {"db": self.target.database, "precision": "ns"}
        if self.target.retention_policy:
            params["rp"] = self.target.retention_policy
        self.request("POST", "/write", params, body.encode("utf-8"))

    def query(
        self, q: str, *, database: bool = True, bind: dict[str, Any] | None = None
    ) -> list[dict[str, Any]]:
        """Run InfluxQL; returns the ``results`` list (ns epochs). Statement errors raise.

        ``bind`` values fill ``$name`` placeholders server-side (the v1 API's ``params``), so
        no value is ever spliced into query text.
        """
        params = {"q": q, "epoch": "ns"}
        if bind:
            params["params"] = json.dumps(bind)
        if database:
            params["db"] = self.target.database
            if self.target.retention_policy:
                params["rp"] = self.target.retention_policy
        body = urllib.parse.urlencode(params).encode()
        _, raw = self.request("POST", "/query", {}, body)
        try:
            doc = json.loads(raw)
        except ValueError as exc:
            raise InfluxHttpError(200, f"not JSON from /query: {raw[:200]!r}") from exc
        if "error" in doc:
            raise InfluxHttpError(200, str(doc["error"]))
        results: list[dict[str, Any]] = doc.get("results", [])
        for result in results:
            if "error" in result:
                raise InfluxHttpError(200, str(result["error"]))
        return results


def _error_text(raw: bytes) -> str:
    try:
        doc = json.loads(raw)
    except ValueError:
        return raw.decode("utf-8", "replace")[:200]
    return str(doc.get("error") or doc.get("message") or "")[:300]

