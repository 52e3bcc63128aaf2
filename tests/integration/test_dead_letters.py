"""A record the server refuses does not stop the sink: isolated, parked with the server's
reason, and everything after it still arrives (real InfluxDB and real Mosquitto)."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from gateway.cli import main
from gateway.sinks.influx import make_influx
from gateway.sinks.mqtt import make_mqtt
from gateway.store.deadletters import dead_letters
from gateway.store.journal import Journal
from tests.integration.sinks_data import ctx, forwarding, result, shift, until
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]


def unsent(journal: Journal, sink: str) -> int:
    return sum(n for n, _ in journal.backlog(sink).values())


async def test_a_timestamp_influxdb_cannot_hold_is_parked(
    influxdb: InfluxServer, influx_db: str, journal: Journal
) -> None:
    before = shift(1, 10)
    # a station clock reading 2300: beyond InfluxDB's nanosecond range (it ends in 2262)
    far = result("L1-S1", 500, ended_at=datetime(2300, 1, 1, tzinfo=UTC))
    after = shift(11, 20)
    journal.write([*before, far, *after])
    fwd = make_influx("influx", {"url": influxdb.url(influx_db), "batch_size": 50}, ctx())
    async with forwarding(fwd, journal):
        await until(lambda: unsent(journal, "influx") == 0, 30, "the cursor moves past it")
    parked = dead_letters(journal, "influx")
    assert [p["record_id"] for p in parked] == [far.record_id]
    assert "HTTP 400" in parked[0]["reason"]
    rows = influxdb.query(influx_db, "SELECT * FROM leak_results")
    ids = {r["record_id"] for r in rows}
    assert far.record_id not in ids
    assert {r.record_id for r in after if r.kind == "result"} <= ids  # later ones arrived


async def test_a_payload_over_the_limit_is_parked_not_retried(
    mosquitto: MosquittoServer, journal: Journal, capsys: pytest.CaptureFixture[str]
) -> None:
    big = result("L1-S1", 900, raw="X" * 5000)
    small = shift(1, 5)
    journal.write([big, *small])
    fwd = make_mqtt("mqtt-dl", {"url": mosquitto.url, "max_payload_bytes": 4096,
                                "client_id": "gw-dl"}, ctx(gateway_id="gw-dl"))
    async with (
        MqttLog(mosquitto, "leakfleet/#", client_id="dl-sub") as sub,
        forwarding(fwd, journal),
    ):
        await until(lambda: unsent(journal, "mqtt-dl") == 0, 20, "everything handled")
        await until(lambda: len(sub.records()) >= len(small), 10, "the others delivered")
    assert big.record_id not in sub.records()
    [parked] = dead_letters(journal, "mqtt-dl")
    assert "over the broker's limit" in parked["reason"]
    assert main(["dead-letters", "--store", f"sqlite:///{journal.path}", "list"]) == 0
    assert big.record_id in capsys.readouterr().out


async def test_a_large_backlog_goes_out_quietly(
    mosquitto: MosquittoServer, journal: Journal, caplog: pytest.LogCaptureFixture
) -> None:
    """3 000 records waiting: the sink publishes a bounded number at a time and the MQTT
    library's 'pending publish calls' chatter stays out of the log."""
    import logging

    caplog.set_level(logging.DEBUG)
    backlog = [result("L1-S1", c) for c in range(1, 3001)]
    journal.write(backlog)
    fwd = make_mqtt("mqtt-bl", {"url": mosquitto.url, "batch_size": 500,
                                "client_id": "gw-bl"}, ctx(gateway_id="gw-bl"))
    async with forwarding(fwd, journal):
        await until(lambda: unsent(journal, "mqtt-bl") == 0, 60, "the backlog sent")
    assert not [r for r in caplog.records if "pending publish" in r.getMessage()]
