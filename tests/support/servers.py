"""Real Mosquitto and InfluxDB 1.x servers for integration tests, on free loopback ports.

    from tests.support.servers import MosquittoServer, InfluxServer

    with MosquittoServer(tmp_path / "mqtt") as broker:      # anonymous, 127.0.0.1:<free port>
        ...
        broker.stop()        # outage: the port stops answering
        broker.start()       # same port, same config
    with MosquittoServer(tmp_path / "mqtt", users={"gw": "s3cret"}, tls=True) as broker:
        broker.port, broker.tls_port, broker.mtls_port, broker.certs.ca

    with InfluxServer(tmp_path / "influx") as influx:       # data/meta/wal under tmp_path
        influx.create_database("leakfleet"); influx.query("leakfleet", "SELECT ...")

Binaries come from Debian (``mosquitto``, ``influxdb``). ``require_binary`` skips with a clear
reason when one is missing on a developer machine, and fails in CI (``CI=true``), where a missing
server means the CI set-up is broken, not that the test does not apply.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import getpass
import json
import os
import re
import shutil
import signal
import socket
import subprocess
import time
import urllib.error
import urllib.parse
import urllib.request
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import Any, Self

import pytest

__all__ = [
    "Certs",
    "InfluxServer",
    "MosquittoServer",
    "MqttLog",
    "free_port",
    "make_certs",
    "require_binary",
    "stopped",
]

HOST = "127.0.0.1"


def require_binary(name: str) -> str:
    """Path of ``name``; skip (developer machine) or fail (CI) when it is not installed."""
    path = shutil.which(name) or shutil.which(name, path="/usr/sbin:/usr/bin:/sbin:/bin")
    if path:
        return path
    reason = f"{name} is not installed (Debian: apt-get install {_PACKAGE.get(name, name)})"
    if os.environ.get("CI", "").lower() == "true":
        pytest.fail(f"CI must provide real servers: {reason}", pytrace=False)
    pytest.skip(reason)


_PACKAGE = {"mosquitto": "mosquitto", "mosquitto_passwd": "mosquitto", "influxd": "influxdb"}


def free_port() -> int:
    """A TCP port on loopback that nothing listens on right now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((HOST, 0))
        return int(s.getsockname()[1])


def _wait_tcp(port: int, proc: subprocess.Popen[bytes], log: Path, timeout: float = 15.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"server exited with {proc.returncode}: {_tail(log)}")
        try:
            with socket.create_connection((HOST, port), timeout=0.5):
                return
        except OSError:
            time.sleep(0.05)
    raise RuntimeError(f"nothing answered on {HOST}:{port} within {timeout}s: {_tail(log)}")


def _tail(log: Path, n: int = 2000) -> str:
    try:
        return log.read_text(errors="replace")[-n:]
    except OSError:
        return "(no log)"


class _Process:
    """A server process that can be stopped and started again on the same ports and files."""

    name = "server"

    def __init__(self, workdir: Path) -> None:
        self.workdir = workdir
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.log_path = workdir / f"{self.name}.log"
        self._proc: subprocess.Popen[bytes] | None = None
        self._log: Any = None

    def _command(self) -> list[str]:
        raise NotImplementedError

    def _wait_ready(self, proc: subprocess.Popen[bytes]) -> None:
        raise NotImplementedError

    @property
    def running(self) -> bool:
        return self._proc is not None and self._proc.poll() is None

    def start(self) -> None:
        if self.running:
            return
        self._log = self.log_path.open("ab")
        self._proc = subprocess.Popen(
            self._command(), stdout=self._log, stderr=subprocess.STDOUT, cwd=self.workdir
        )
        try:
            self._wait_ready(self._proc)
        except BaseException:
            self.stop()
            raise

    def stop(self) -> None:
        """Terminate (SIGTERM, then SIGKILL) and wait; the ports stop answering."""
        proc, self._proc = self._proc, None
        if proc is not None and proc.poll() is None:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(timeout=10)
        if self._log is not None:
            self._log.close()
            self._log = None

    def restart(self) -> None:
        self.stop()
        self.start()

    def log_text(self) -> str:
        return self.log_path.read_text(errors="replace") if self.log_path.exists() else ""

    def __enter__(self) -> Self:
        self.start()
        return self

    def __exit__(
        self, et: type[BaseException] | None, ev: BaseException | None, tb: TracebackType | None
    ) -> None:
        self.stop()


# --------------------------------------------------------------------------- certificates


@dataclass(frozen=True)
class Certs:
    ca: Path
    server_cert: Path
    server_key: Path
    client_cert: Path
    client_key: Path


def make_certs(directory: Path) -> Certs:
    """A throw-away CA, a server certificate for 127.0.0.1/localhost and a client certificate."""
    import ipaddress

    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

    directory.mkdir(parents=True, exist_ok=True)
    now = dt.datetime.now(dt.UTC)

    def name(cn: str) -> x509.Name:
        return x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, cn)])

    def write_key(key: ec.EllipticCurvePrivateKey, path: Path) -> None:
        path.write_bytes(
            key.private_bytes(
                serialization.Encoding.PEM,
                serialization.PrivateFormat.PKCS8,
                serialization.NoEncryption(),
            )
        )
        path.chmod(0o600)

    ca_key = ec.generate_private_key(ec.SECP256R1())
    ca_cert = (
        x509.CertificateBuilder()
        .subject_name(name("leakfleet test CA"))
        .issuer_name(name("leakfleet test CA"))
        .public_key(ca_key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5))
        .not_valid_after(now + dt.timedelta(days=2))
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .add_extension(
            x509.KeyUsage(
                digital_signature=True, content_commitment=False, key_encipherment=False,
                data_encipherment=False, key_agreement=False, key_cert_sign=True,
                crl_sign=True, encipher_only=False, decipher_only=False,
            ),
            critical=True,
        )
        .add_extension(
            x509.SubjectKeyIdentifier.from_public_key(ca_key.public_key()), critical=False
        )
        .sign(ca_key, hashes.SHA256())
    )

    def leaf(cn: str, usage: x509.ObjectIdentifier, san: bool) -> tuple[Any, Any]:
        key = ec.generate_private_key(ec.SECP256R1())
        builder = (
            x509.CertificateBuilder()
            .subject_name(name(cn))
            .issuer_name(ca_cert.subject)
            .public_key(key.public_key())
            .serial_number(x509.random_serial_number())
            .not_valid_before(now - dt.timedelta(minutes=5))
            .not_valid_after(now + dt.timedelta(days=2))
            .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
            .add_extension(x509.ExtendedKeyUsage([usage]), critical=False)
            .add_extension(
                x509.AuthorityKeyIdentifier.from_issuer_public_key(ca_key.public_key()),
                critical=False,
            )
        )
        if san:
            builder = builder.add_extension(
                x509.SubjectAlternativeName(
                    [x509.DNSName("localhost"), x509.IPAddress(ipaddress.ip_address(HOST))]
                ),
                critical=False,
            )
        return key, builder.sign(ca_key, hashes.SHA256())

    server_key, server_cert = leaf("localhost", ExtendedKeyUsageOID.SERVER_AUTH, san=True)
    client_key, client_cert = leaf("leakfleet-gateway", ExtendedKeyUsageOID.CLIENT_AUTH, san=False)
    certs = Certs(
        ca=directory / "ca.pem",
        server_cert=directory / "server.pem",
        server_key=directory / "server.key",
        client_cert=directory / "client.pem",
        client_key=directory / "client.key",
    )
    pem = serialization.Encoding.PEM
    certs.ca.write_bytes(ca_cert.public_bytes(pem))
    certs.server_cert.write_bytes(server_cert.public_bytes(pem))
    certs.client_cert.write_bytes(client_cert.public_bytes(pem))
    write_key(server_key, certs.server_key)
    write_key(client_key, certs.client_key)
    return certs


# --------------------------------------------------------------------------- Mosquitto


class MosquittoServer(_Process):
    """``mosquitto -c <cfg>`` with explicit loopback listeners.

    Without ``users``: one anonymous plain listener. With ``users``: a password file (written
    with ``mosquitto_passwd``) and no anonymous access. With ``tls=True`` also a TLS listener
    (``tls_port``, server certificate only) and a mutual-TLS listener (``mtls_port``, client
    certificate required), both with the same password file.
    """

    name = "mosquitto"

    def __init__(
        self, workdir: Path, *, users: dict[str, str] | None = None, tls: bool = False
    ) -> None:
        super().__init__(workdir)
        self.binary = require_binary("mosquitto")
        self.host = HOST
        self.users = dict(users or {})
        self.port = free_port()
        self.tls_port = free_port() if tls else None
        self.mtls_port = free_port() if tls else None
        self.certs = make_certs(workdir / "certs") if tls else None
        self.config_path = workdir / "mosquitto.conf"
        self._write_config()

    def _write_config(self) -> None:
        lines = [
            "per_listener_settings false",
            # kept across stop()/start(), so a subscriber's persistent session (and what was
            # queued for it) survives a broker outage, as on a production broker
            "persistence true",
            f"persistence_location {self.workdir}/",
            "autosave_interval 0",
            "log_dest stdout",
            "log_type error",
            "log_type warning",
            "log_type notice",
            "log_type information",
            "connection_messages true",
            # as deploy/mosquitto/mosquitto.conf: without it the broker's Nagle holds a PUBACK
            # or a delivery behind the previous one's TCP ACK (25-50 ms on a burst)
            "set_tcp_nodelay true",
            # Started as root, mosquitto would drop to user "mosquitto", which cannot read a
            # password file or key in the test's temp dir; stay the current user instead.
            f"user {getpass.getuser()}",
        ]
        if self.users:
            passwd = require_binary("mosquitto_passwd")
            pw_file = self.workdir / "passwd"
            pw_file.unlink(missing_ok=True)
            for i, (user, password) in enumerate(self.users.items()):
                flags = ["-b", "-c"] if i == 0 else ["-b"]
                subprocess.run(
                    [passwd, *flags, str(pw_file), user, password],
                    check=True, capture_output=True, timeout=10,
                )
            pw_file.chmod(0o600)
            lines += ["allow_anonymous false", f"password_file {pw_file}"]
        else:
            lines += ["allow_anonymous true"]
        lines += ["", f"listener {self.port} {HOST}", "protocol mqtt"]
        if self.certs is not None:
            for port, require in ((self.tls_port, "false"), (self.mtls_port, "true")):
                lines += [
                    "",
                    f"listener {port} {HOST}",
                    "protocol mqtt",
                    f"cafile {self.certs.ca}",
                    f"certfile {self.certs.server_cert}",
                    f"keyfile {self.certs.server_key}",
                    f"require_certificate {require}",
                ]
        self.config_path.write_text("\n".join(lines) + "\n")

    def _command(self) -> list[str]:
        return [self.binary, "-c", str(self.config_path)]

    def _wait_ready(self, proc: subprocess.Popen[bytes]) -> None:
        for port in (self.port, self.tls_port, self.mtls_port):
            if port is not None:
                _wait_tcp(port, proc, self.log_path)

    @property
    def url(self) -> str:
        return f"mqtt://{HOST}:{self.port}"


# --------------------------------------------------------------------------- InfluxDB 1.x


class InfluxServer(_Process):
    """``influxd -config <cfg>`` with the generated default config pointed at ``workdir``.

    Data survive ``stop()``/``start()`` (same directories), as a real database's would.
    """

    name = "influxd"

    def __init__(self, workdir: Path) -> None:
        super().__init__(workdir)
        self.binary = require_binary("influxd")
        self.host = HOST
        self.port = free_port()
        self.rpc_port = free_port()
        self.config_path = workdir / "influxdb.conf"
        self._write_config()

    def _write_config(self) -> None:
        generated = subprocess.run(
            [self.binary, "config"], check=True, capture_output=True, timeout=30
        ).stdout.decode()
        self.config_path.write_text(rewrite_influx_config(generated, self.workdir, self.port,
                                                          self.rpc_port))

    def _command(self) -> list[str]:
        return [self.binary, "-config", str(self.config_path)]

    def _wait_ready(self, proc: subprocess.Popen[bytes]) -> None:
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            if proc.poll() is not None:
                raise RuntimeError(f"influxd exited with {proc.returncode}: {_tail(self.log_path)}")
            try:
                with urllib.request.urlopen(f"{self.base_url}/ping", timeout=1) as resp:
                    if resp.status == 204:
                        return
            except (OSError, urllib.error.URLError):
                pass
            time.sleep(0.1)
        raise RuntimeError(f"influxd did not answer /ping: {_tail(self.log_path)}")

    @property
    def base_url(self) -> str:
        return f"http://{HOST}:{self.port}"

    def url(self, database: str) -> str:
        return f"influxdb://{HOST}:{self.port}/{database}"

    def _post_query(self, q: str, db: str | None = None) -> dict[str, Any]:
        params = {"q": q, "epoch": "ns"}
        if db:
            params["db"] = db
        data = urllib.parse.urlencode(params).encode()
        req = urllib.request.Request(f"{self.base_url}/query", data=data, method="POST")
        with urllib.request.urlopen(req, timeout=10) as resp:
            body: dict[str, Any] = json.loads(resp.read())
        return body

    def create_database(self, db: str) -> None:
        self._post_query(f'CREATE DATABASE "{db}"')

    def drop_database(self, db: str) -> None:
        self._post_query(f'DROP DATABASE "{db}"')

    def query(self, db: str, q: str) -> list[dict[str, Any]]:
        """Rows of the first statement's series as dicts (with ``time`` in ns) plus tags."""
        body = self._post_query(q, db)
        rows: list[dict[str, Any]] = []
        for result in body.get("results", []):
            if "error" in result:
                raise RuntimeError(result["error"])
            for series in result.get("series", []):
                tags = series.get("tags", {})
                for values in series.get("values", []):
                    rows.append({**tags, **dict(zip(series["columns"], values, strict=True))})
        return rows


def rewrite_influx_config(text: str, workdir: Path, http_port: int, rpc_port: int) -> str:
    """Point every directory at ``workdir`` and every listener at loopback; nothing phones home."""
    overrides: dict[str | None, dict[str, str]] = {
        None: {"reporting-enabled": "false", "bind-address": f'"{HOST}:{rpc_port}"'},
        "meta": {"dir": f'"{workdir / "meta"}"', "logging-enabled": "false"},
        "data": {
            "dir": f'"{workdir / "data"}"',
            "wal-dir": f'"{workdir / "wal"}"',
            "query-log-enabled": "false",
        },
        "monitor": {"store-enabled": "false"},
        "http": {
            "enabled": "true",
            "bind-address": f'"{HOST}:{http_port}"',
            "auth-enabled": "false",
            "log-enabled": "false",
            "pprof-enabled": "false",
            "unix-socket-enabled": "false",
        },
        "logging": {"level": '"warn"', "suppress-logo": "true"},
        "continuous_queries": {"log-enabled": "false"},
    }
    section: str | None = None
    out: list[str] = []
    key_re = re.compile(r"^(\s*)([A-Za-z0-9_-]+)\s*=")
    for line in text.splitlines():
        header = re.match(r"^\s*\[\[?([^\]]+)\]\]?\s*$", line)
        if header:
            section = header.group(1).strip()
        else:
            m = key_re.match(line)
            if m and m.group(2) in overrides.get(section, {}):
                line = f"{m.group(1)}{m.group(2)} = {overrides[section][m.group(2)]}"
        out.append(line)
    return "\n".join(out) + "\n"


@contextlib.contextmanager
def stopped(server: _Process) -> Any:
    """Stop ``server`` for the body of the block, then start it again (an outage)."""
    server.stop()
    try:
        yield server
    finally:
        server.start()


# --------------------------------------------------------------------------- MQTT subscriber


class MqttLog:
    """A real subscriber (aiomqtt) that logs every message it gets, across broker restarts.

    Persistent session (clean_session false, fixed client id, QoS 1 subscription), so what the
    broker queued for it while it was reconnecting is delivered, as it would be to a consumer.

        async with MqttLog(broker, "leakfleet/#") as sub:
            await sub.wait_for(lambda msgs: len(msgs) >= 10, timeout=20)
            sub.messages      # [(topic, payload bytes, retain flag)]
    """

    def __init__(
        self, broker: MosquittoServer, topic: str = "leakfleet/#", *,
        client_id: str = "leakfleet-test-subscriber", **client_kwargs: Any,
    ) -> None:
        self.broker = broker
        self.topic = topic
        self.client_id = client_id
        self.client_kwargs = client_kwargs
        self.messages: list[tuple[str, bytes, bool]] = []
        self.connects = 0
        self._task: Any = None
        self._subscribed: Any = None

    async def __aenter__(self) -> Self:
        import asyncio

        self._subscribed = asyncio.Event()
        self._task = asyncio.create_task(self._run(), name="mqtt test subscriber")
        async with asyncio.timeout(15):
            await self._subscribed.wait()
        return self

    async def __aexit__(self, *exc: object) -> None:
        import asyncio

        self._task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await self._task

    async def _run(self) -> None:
        import asyncio

        import aiomqtt

        while True:
            try:
                client = aiomqtt.Client(
                    HOST, self.broker.port, identifier=self.client_id, clean_session=False,
                    keepalive=10, timeout=5, **self.client_kwargs,
                )
                async with client:
                    await client.subscribe(self.topic, qos=1)
                    self.connects += 1
                    self._subscribed.set()
                    async for msg in client.messages:
                        payload = msg.payload if isinstance(msg.payload, bytes) else str(
                            msg.payload).encode()
                        self.messages.append((str(msg.topic), payload, bool(msg.retain)))
            except aiomqtt.MqttError:
                await asyncio.sleep(0.2)

    async def wait_for(self, predicate: Any, timeout: float) -> None:
        import asyncio

        async with asyncio.timeout(timeout):
            while not predicate(self.messages):
                await asyncio.sleep(0.05)

    def records(self, suffix: str | None = None) -> dict[str, dict[str, Any]]:
        """Payloads as dicts by record_id (de-duplicated), optionally for topics ``…/suffix``."""
        out: dict[str, dict[str, Any]] = {}
        for topic, payload, _ in self.messages:
            if suffix is not None and not topic.endswith("/" + suffix):
                continue
            try:
                doc = json.loads(payload)
            except ValueError:
                continue
            if isinstance(doc, dict) and "record_id" in doc:
                out[doc["record_id"]] = doc
        return out
