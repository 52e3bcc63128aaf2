"""Outages of the real broker and the real database in the middle of a shift: nothing lost,
nothing doubled (after de-duplication by record_id for MQTT; exactly once in InfluxDB)."""

from __future__ import annotations

import asyncio
from pathlib import Path

import pytest

from gateway.records import Record
from gateway.sinks.influx import make_influx
from gateway.sinks.mqtt import make_mqtt
from gateway.store.journal import KINDS, Journal
from tests.integration.sinks_data import ctx, forwarding, shift, until
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]

FAST = {  # short timeouts and backoff so an outage is noticed and left quickly
    "batch_size": 20, "poll_interval_s": 0.05, "connect_timeout_s": 2, "send_timeout_s": 2,
    "backoff_initial_s": 0.05, "backoff_max_s": 0.5, "drain_timeout_s": 3,
}


def unsent(journal: Journal, sink: str) -> int:
    return sum(n for n, _ in journal.backlog(sink).values())


def influx_ids(server: InfluxServer, db: str) -> list[str]:
    ids: list[str] = []
    for m in ("leak_results", "leak_calibrations", "station_status"):
        ids += [r["record_id"] for r in server.query(db, f"SELECT record_id FROM {m}")]
    return ids


async def test_broker_then_database_outage_mid_shift(tmp_path: Path, journal: Journal) -> None:
    with (
        MosquittoServer(tmp_path / "mqtt") as broker,
        InfluxServer(tmp_path / "influx") as influx,
    ):
        influx.create_database("plant")
        mqtt = make_mqtt("mqtt", {"url": broker.url, **FAST}, ctx())
        db = make_influx("influx", {"url": influx.url("plant"), **FAST}, ctx())
        written: list[Record] = []

        async def produce(first: int, last: int) -> None:
            """The gateway's journal keeps filling whatever the sinks are doing."""
            for c in range(first, last + 1, 5):
                batch = shift(c, min(c + 4, last))
                journal.write(batch)
                written.extend(batch)
                await asyncio.sleep(0.02)

        async with (
            MqttLog(broker, client_id="outage-sub") as sub,
            forwarding(mqtt, journal),
            forwarding(db, journal),
        ):
            await produce(1, 40)
            await until(lambda: unsent(journal, "mqtt") == 0, 20, "first part on MQTT")

            broker.stop()  # broker outage while stations keep testing
            await produce(41, 80)
            await until(lambda: mqtt.failures > 0, 20, "the MQTT sink to notice")
            assert unsent(journal, "mqtt") > 0  # waiting in the journal, not lost
            broker.start()
            await until(lambda: unsent(journal, "mqtt") == 0, 30, "MQTT backlog drained")

            influx.stop()  # then the database
            await produce(81, 120)
            await until(lambda: db.failures > 0, 20, "the InfluxDB sink to notice")
            assert unsent(journal, "influx") > 0
            influx.start()
            await produce(121, 130)
            await until(lambda: unsent(journal, "influx") == 0, 30, "InfluxDB backlog drained")
            await until(lambda: unsent(journal, "mqtt") == 0, 30, "MQTT caught up")
            want = {r.record_id for r in written}
            await until(lambda: want <= set(sub.records()), 30, "subscriber has everything")

        got = sub.records()
        assert set(got) == want  # every record, after de-duplication by record_id
        ids = influx_ids(influx, "plant")
        assert len(ids) == len(want) and set(ids) == want  # exactly once
        assert sub.connects >= 2  # the subscriber itself lived through the outage


async def test_forwarder_restart_while_sink_down(tmp_path: Path) -> None:
    """The cursor is in the journal: a new forwarder process picks up where the old one was."""
    from gateway.store.journal import open_journal

    url = f"sqlite:///{tmp_path / 'j.db'}"
    with InfluxServer(tmp_path / "influx") as influx:
        influx.create_database("plant")
        first = shift(1, 20)
        j1 = open_journal(url)
        j1.write(first)
        async with forwarding(make_influx("influx", {"url": influx.url("plant"), **FAST},
                                          ctx()), j1):
            await until(lambda: unsent(j1, "influx") == 0, 20, "first part acknowledged")
        cursors = {k: j1.get_cursor("influx", k) for k in KINDS}
        influx.stop()
        second = shift(21, 40)
        j1.write(second)
        # the gateway restarts while the database is still down
        fwd = make_influx("influx", {"url": influx.url("plant"), **FAST}, ctx())
        async with forwarding(fwd, j1):
            await until(lambda: fwd.failures >= 2, 20, "failed attempts while down")
        j1.close()
        j2 = open_journal(url)  # a new process: only the journal file carries over
        assert {k: j2.get_cursor("influx", k) for k in KINDS} == cursors
        influx.start()
        async with forwarding(make_influx("influx", {"url": influx.url("plant"), **FAST},
                                          ctx()), j2):
            await until(lambda: unsent(j2, "influx") == 0, 20, "backlog after restart")
        j2.close()
        ids = influx_ids(influx, "plant")
        assert sorted(ids) == sorted(r.record_id for r in first + second)
