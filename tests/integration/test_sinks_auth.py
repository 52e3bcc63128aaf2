"""A real Mosquitto with a password file and TLS listeners (certificates made in the test)."""

from __future__ import annotations

import logging
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from gateway.sinks.mqtt import PASSWORD_ENV, make_mqtt
from gateway.store.journal import Journal
from tests.integration.sinks_data import ctx, forwarding, shift, until
from tests.support.servers import MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]

SECRET = "Nm-7f3a9-correct-horse"
WRONG = "Wr0ng-9b1e-battery-staple"
FAST = {"poll_interval_s": 0.05, "connect_timeout_s": 3, "send_timeout_s": 3,
        "backoff_initial_s": 0.05, "backoff_max_s": 0.3}


@pytest.fixture(scope="module")
def secure_broker(tmp_path_factory: pytest.TempPathFactory) -> Iterator[MosquittoServer]:
    users = {"gw-l1": SECRET, "reader": "reader-pass"}
    with MosquittoServer(tmp_path_factory.mktemp("secure"), users=users, tls=True) as broker:
        yield broker


def reader(broker: MosquittoServer, client_id: str) -> MqttLog:
    return MqttLog(broker, client_id=client_id, username="reader", password="reader-pass")


def unsent(journal: Journal) -> int:
    return sum(n for n, _ in journal.backlog("mqtt").values())


async def _delivers(broker: MosquittoServer, journal: Journal, options: dict[str, Any],
                    sub_id: str) -> None:
    records = shift(1, 10)
    journal.write(records)
    fwd = make_mqtt("mqtt", {**options, **FAST}, ctx())
    async with reader(broker, sub_id) as sub, forwarding(fwd, journal):
        await until(lambda: {r.record_id for r in records} <= set(sub.records()), 20,
                    "records at the subscriber")


async def test_password_from_env(secure_broker: MosquittoServer, journal: Journal,
                                 monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(PASSWORD_ENV, SECRET)
    await _delivers(secure_broker, journal, {"url": secure_broker.url, "username": "gw-l1"},
                    "sub-env")


async def test_tls_with_ca_and_password_file(secure_broker: MosquittoServer, journal: Journal,
                                             tmp_path: Path,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(PASSWORD_ENV, raising=False)
    secret_file = tmp_path / "mqtt-password"
    secret_file.write_text(SECRET + "\n")
    assert secure_broker.certs is not None
    options = {
        "url": f"mqtts://127.0.0.1:{secure_broker.tls_port}", "username": "gw-l1",
        "password_file": str(secret_file), "ca_file": str(secure_broker.certs.ca),
        "protocol": "5",
    }
    await _delivers(secure_broker, journal, options, "sub-tls")


async def test_mutual_tls_client_certificate(secure_broker: MosquittoServer, journal: Journal,
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(PASSWORD_ENV, SECRET)
    certs = secure_broker.certs
    assert certs is not None
    options = {
        "url": f"mqtts://127.0.0.1:{secure_broker.mtls_port}", "username": "gw-l1",
        "ca_file": str(certs.ca), "cert_file": str(certs.client_cert),
        "key_file": str(certs.client_key),
    }
    await _delivers(secure_broker, journal, options, "sub-mtls")


async def test_mutual_tls_without_client_certificate_is_refused(
    secure_broker: MosquittoServer, journal: Journal, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv(PASSWORD_ENV, SECRET)
    assert secure_broker.certs is not None
    journal.write(shift(1, 2))
    fwd = make_mqtt("mqtt", {"url": f"mqtts://127.0.0.1:{secure_broker.mtls_port}",
                             "username": "gw-l1", "ca_file": str(secure_broker.certs.ca),
                             **FAST, "connect_timeout_s": 1}, ctx())
    async with forwarding(fwd, journal):
        await until(lambda: fwd.failures >= 1, 20, "a refused attempt")
    assert unsent(journal) > 0


async def test_wrong_password_one_clear_line_no_secret(
    secure_broker: MosquittoServer, journal: Journal, monkeypatch: pytest.MonkeyPatch,
    caplog: pytest.LogCaptureFixture,
) -> None:
    caplog.set_level(logging.DEBUG)  # paho's own debug lines included
    monkeypatch.setenv(PASSWORD_ENV, WRONG)
    journal.write(shift(1, 3))
    fwd = make_mqtt("mqtt", {"url": secure_broker.url, "username": "gw-l1", **FAST}, ctx())
    async with forwarding(fwd, journal):
        await until(lambda: fwd.failures >= 3, 20, "retries with backoff")
    errors = [r for r in caplog.records if r.levelno >= logging.ERROR]
    assert len(errors) == 1  # one clear line, not one per retry
    line = errors[0].getMessage()
    assert "refused the login" in line and "gw-l1" in line and PASSWORD_ENV in line
    assert WRONG not in caplog.text and SECRET not in caplog.text
    assert unsent(journal) > 0  # nothing acknowledged, nothing lost


async def test_anonymous_refused(secure_broker: MosquittoServer, journal: Journal,
                                 monkeypatch: pytest.MonkeyPatch,
                                 caplog: pytest.LogCaptureFixture) -> None:
    monkeypatch.delenv(PASSWORD_ENV, raising=False)
    journal.write(shift(1, 1))
    fwd = make_mqtt("mqtt", {"url": secure_broker.url, **FAST}, ctx())
    async with forwarding(fwd, journal):
        await until(lambda: fwd.failures >= 1, 20, "refusal")
    assert "anonymous login" in caplog.text
