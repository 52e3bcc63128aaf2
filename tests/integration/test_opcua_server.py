"""OPC UA server sink: journal → our asyncua server → a real asyncua Client over
Basic256Sha256 SignAndEncrypt (self-signed RSA certificates made here with cryptography)."""

from __future__ import annotations

import datetime as dt
import socket
from pathlib import Path
from typing import Any

import pytest

from gateway.records import CalibrationEvent, StationStatus, TestResult
from gateway.sinks.opcua import OpcUaServer, make_opcua
from gateway.store.journal import Journal
from tests.integration.sinks_data import STATIONS, ctx, forwarding, result, shift, until

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]
asyncua = pytest.importorskip("asyncua")


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def self_signed(directory: Path, name: str, uri: str, *, client: bool) -> tuple[Path, Path]:
    """An RSA-2048 certificate (DER) and key (PEM) as an OPC UA application instance has."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import rsa
    from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

    key = rsa.generate_private_key(public_exponent=65537, key_size=2048)
    subject = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, name)])
    now = dt.datetime.now(dt.UTC)
    usage = ExtendedKeyUsageOID.CLIENT_AUTH if client else ExtendedKeyUsageOID.SERVER_AUTH
    cert = (
        x509.CertificateBuilder().subject_name(subject).issuer_name(subject)
        .public_key(key.public_key()).serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5))
        .not_valid_after(now + dt.timedelta(days=2))
        .add_extension(x509.SubjectAlternativeName(
            [x509.UniformResourceIdentifier(uri), x509.DNSName("localhost")]), critical=False)
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(x509.KeyUsage(
            digital_signature=True, content_commitment=True, key_encipherment=True,
            data_encipherment=True, key_agreement=False, key_cert_sign=False, crl_sign=False,
            encipher_only=False, decipher_only=False), critical=True)
        .add_extension(x509.ExtendedKeyUsage([usage]), critical=False)
        .sign(key, hashes.SHA256())
    )
    cert_path, key_path = directory / f"{name}.der", directory.parent / f"{name}-key.pem"
    cert_path.write_bytes(cert.public_bytes(serialization.Encoding.DER))
    key_path.write_bytes(key.private_bytes(serialization.Encoding.PEM,
                                           serialization.PrivateFormat.TraditionalOpenSSL,
                                           serialization.NoEncryption()))
    return cert_path, key_path


CLIENT_URI = "urn:leakfleet:test:host-client"


@pytest.fixture
def pki(tmp_path: Path) -> dict[str, Path]:
    trusted, own = tmp_path / "trusted", tmp_path / "own"
    trusted.mkdir()
    own.mkdir()
    server_cert, server_key = self_signed(own, "server", "urn:leakfleet:gw-test:opcua",
                                          client=False)
    client_cert, client_key = self_signed(trusted, "client", CLIENT_URI, client=True)
    stranger_cert, stranger_key = self_signed(own, "stranger", CLIENT_URI, client=True)
    return {"server_cert": server_cert, "server_key": server_key, "trusted": trusted,
            "client_cert": client_cert, "client_key": client_key,
            "stranger_cert": stranger_cert, "stranger_key": stranger_key}


async def secure_client(url: str, cert: Path, key: Path, server_cert: Path) -> Any:
    from asyncua import Client, ua
    from asyncua.crypto.security_policies import SecurityPolicyBasic256Sha256

    client = Client(url, timeout=10)
    client.application_uri = CLIENT_URI
    await client.set_security(SecurityPolicyBasic256Sha256, str(cert), str(key),
                              server_certificate=str(server_cert),
                              mode=ua.MessageSecurityMode.SignAndEncrypt)
    return client


async def test_secure_browse_read_and_subscribe(pki: dict[str, Path], journal: Journal) -> None:
    from asyncua import Client, ua

    records = shift(1, 20)
    journal.write(records)
    url = f"opc.tcp://127.0.0.1:{free_port()}/leakfleet"
    c = ctx(site="Northmere Works")
    fwd = make_opcua("ua", {"url": url, "cert_file": str(pki["server_cert"]),
                            "key_file": str(pki["server_key"]),
                            "trusted_clients_dir": str(pki["trusted"]),
                            "poll_interval_s": 0.1}, c)
    server = fwd.client
    assert isinstance(server, OpcUaServer)
    async with forwarding(fwd, journal):
        await until(lambda: sum(n for n, _ in journal.backlog("ua").values()) == 0, 30,
                    "every record applied")
        client = await secure_client(url, pki["client_cert"], pki["client_key"],
                                     pki["server_cert"])
        async with client:
            idx = await client.get_namespace_index("urn:leakfleet:gw-test")
            # browse: LeakFleet / site / lines / stations, display names as configured
            root = await client.nodes.objects.get_child(f"{idx}:LeakFleet")
            site = await root.get_child(f"{idx}:northmere-works")
            assert (await site.read_display_name()).Text == "Northmere Works"
            lines = {(await n.read_browse_name()).Name for n in await site.get_children()}
            assert lines == set(STATIONS.values())
            station = await site.get_child([f"{idx}:L1", f"{idx}:L1-S1"])
            groups = {(await n.read_browse_name()).Name for n in await station.get_children()}
            assert {"LastResult", "LastCalibration", "State", "TestsToday"} <= groups

            def node(*path: str) -> Any:
                return client.get_node(ua.NodeId("/".join(("northmere-works", *path)), idx))

            # read: the values are the journal's latest per station
            for name, line in STATIONS.items():
                last = [r for r in records if isinstance(r, TestResult) and r.station == name][-1]
                base = (line, name, "LastResult")
                assert await node(*base, "record_id").read_value() == last.record_id
                assert await node(*base, "leak_rate").read_value() == last.leak_rate_sccm
                assert await node(*base, "verdict").read_value() == last.verdict.value
                assert await node(*base, "cycle").read_value() == last.cycle
                ended = await node(*base, "ended_at").read_value()
                assert ended.replace(tzinfo=dt.UTC) == last.ended_at
                cal = [r for r in records if isinstance(r, CalibrationEvent)
                       and r.station == name][-1]
                assert await node(line, name, "LastCalibration", "ratio").read_value() == (
                    cal.ratio)
                st = [r for r in records if isinstance(r, StationStatus) and r.station == name]
                assert await node(line, name, "State").read_value() == st[-1].state.value
            # the unit: EUInformation with UNECE's code for pascal; OPC UA Part 8 packs the
            # code's characters into UnitId ("PAL" → 0x50414C = 5259596; from memory of the
            # Part 8 rule, UnitId = c0<<16 | c1<<8 | c2)
            loss = node("L1", "L1-S1", "LastResult", "pressure_loss")
            eu = await (await loss.get_child(f"{idx}:EngineeringUnits")).read_value()
            assert eu.UnitId == 5259596 and eu.DisplayName.Text == "Pa"
            assert eu.NamespaceUri == "http://www.opcfoundation.org/UA/units/un/cefact"
            # read-only
            with pytest.raises(ua.UaStatusCodeError):
                await loss.write_value(ua.DataValue(ua.Variant(1.0, ua.VariantType.Double)))

            # subscribe: a newly journalled result shows up as a data change
            seen: list[object] = []

            class Handler:
                def datachange_notification(self, _node: Any, val: object, _data: Any) -> None:
                    seen.append(val)

            sub = await client.create_subscription(50, Handler())
            await sub.subscribe_data_change(node("L2", "L2-S1", "LastResult", "record_id"))
            await until(lambda: len(seen) >= 1, 10, "the initial value")
            new = result("L2-S1", 21)
            journal.write([new])
            await until(lambda: new.record_id in seen, 15, "the new result via subscription")
            await sub.delete()

            # counters: results of today (the site's day, UTC here) only; the shift above was
            # on another day, so one fresh reject makes 1 test and 1 reject
            assert await node("L1", "L1-S2", "TestsToday").read_value() == 0
            fresh = result("L1-S2", 22, ended_at=dt.datetime.now(dt.UTC), verdict="reject")
            journal.write([fresh])
            await until(lambda: sum(n for n, _ in journal.backlog("ua").values()) == 0, 15,
                        "the fresh result applied")
            assert await node("L1", "L1-S2", "TestsToday").read_value() == 1
            assert await node("L1", "L1-S2", "RejectsToday").read_value() == 1

        # anonymous is off: the server offers no endpoint without security ...
        with pytest.raises(ua.UaError, match="No matching endpoints"):
            async with Client(url, timeout=5):
                pass
        plain = Client(url, timeout=5)
        endpoints = await plain.connect_and_get_server_endpoints()
        assert {e.SecurityPolicyUri.rsplit("#", 1)[-1] for e in endpoints} == {"Basic256Sha256"}
        assert {e.SecurityMode for e in endpoints} == {ua.MessageSecurityMode.SignAndEncrypt}
        # ... and a client whose certificate is not in trusted_clients_dir is turned away
        stranger = await secure_client(url, pki["stranger_cert"], pki["stranger_key"],
                                       pki["server_cert"])
        with pytest.raises(ua.uaerrors.BadCertificateUntrusted):
            async with stranger:
                await stranger.nodes.objects.get_children()


def test_options_are_one_line_errors(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="allow_anonymous = true"):
        make_opcua("ua", {}, ctx())
    with pytest.raises(ValueError, match="trusted_clients_dir is required"):
        make_opcua("ua", {"cert_file": "a.der", "key_file": "a.pem"}, ctx())
    with pytest.raises(ValueError, match="go together"):
        make_opcua("ua", {"cert_file": "a.der"}, ctx())
    with pytest.raises(ValueError, match=r"opc\.tcp://"):
        make_opcua("ua", {"url": "http://x", "allow_anonymous": True}, ctx())
    with pytest.raises(ValueError, match="timezone"):
        make_opcua("ua", {"allow_anonymous": True, "timezone": "Mars/Base"}, ctx())
    with pytest.raises(ValueError, match="unknown key"):
        make_opcua("ua", {"allow_anonymous": True, "password": "x"}, ctx())
    fwd = make_opcua("ua", {"allow_anonymous": True}, ctx())
    assert isinstance(fwd.client, OpcUaServer)
    assert fwd.client.opts.url == "opc.tcp://127.0.0.1:4840/leakfleet"  # loopback by default


async def test_missing_certificate_is_a_config_error(tmp_path: Path) -> None:
    """A certificate path that does not exist disables the sink with one clear line (the
    runtime keeps the other sinks running), it is not retried forever."""
    from gateway.errors import ConfigError

    fwd = make_opcua("ua", {"url": f"opc.tcp://127.0.0.1:{free_port()}/x",
                            "cert_file": str(tmp_path / "nope.der"),
                            "key_file": str(tmp_path / "nope.pem"),
                            "trusted_clients_dir": str(tmp_path)}, ctx())
    with pytest.raises(ConfigError, match="sink ua: certificate files"):
        await fwd.client.connect()
    await fwd.client.close(graceful=False)


async def test_newest_record_wins_and_each_counts_once() -> None:
    """The forwarder may send new records before an older backlog, and repeat a batch after a
    failure: the shown values stay the newest and a result counts once."""
    fwd = make_opcua("ua", {"url": f"opc.tcp://127.0.0.1:{free_port()}/x",
                            "allow_anonymous": True}, ctx())
    srv = fwd.client
    assert isinstance(srv, OpcUaServer)
    now = dt.datetime.now(dt.UTC)
    older = result("L1-S1", 1, ended_at=now, verdict="gross")
    newer = result("L1-S1", 2, ended_at=now, verdict="pass")
    await srv.connect()
    try:
        await srv.send("result", [(7, newer)])
        await srv.send("result", [(5, older), (7, newer)])  # backlog after the lane, a repeat
        shown = srv._vars[srv.node_id("L1-S1", "LastResult", "record_id")]
        assert await shown.read_value() == newer.record_id
        assert await srv._vars[srv.node_id("L1-S1", "TestsToday")].read_value() == 2
        assert await srv._vars[srv.node_id("L1-S1", "RejectsToday")].read_value() == 1
    finally:
        await srv.close(graceful=True)
