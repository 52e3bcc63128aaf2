"""Records flow journal → real Mosquitto (a real subscriber) and → real InfluxDB (InfluxQL)."""

from __future__ import annotations

import json

import pytest

from gateway.records import TestResult
from gateway.sinks.influx import make_influx
from gateway.sinks.mqtt import make_mqtt
from gateway.store.journal import Journal
from tests.integration.sinks_data import ctx, forwarding, shift, until
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]


async def test_journal_to_mqtt_subscriber(mosquitto: MosquittoServer, journal: Journal) -> None:
    records = shift(1, 30)
    journal.write(records)
    fwd = make_mqtt("mqtt", {"url": mosquitto.url, "batch_size": 25}, ctx())
    async with (
        MqttLog(mosquitto, "leakfleet/northmere/#", client_id="flow-sub") as sub,
        forwarding(fwd, journal),
    ):
        await until(lambda: len(sub.records()) >= len(records), 20, "every record on MQTT")
        more = shift(31, 35)
        journal.write(more)
        await until(lambda: len(sub.records()) >= len(records) + len(more), 20, "new records")
    got = sub.records()
    assert set(got) == {r.record_id for r in records + more}
    for r in records:
        # the record as the journal has it, plus the site's display name (topics carry ids)
        assert got[r.record_id] == {**json.loads(json.dumps(r.to_dict())), "site": "northmere"}
    topics = {t for t, _, _ in sub.messages}
    assert "leakfleet/northmere/l1/l1-s1/result" in topics
    assert "leakfleet/northmere/l2/l2-s1/calibration" in topics
    assert "leakfleet/northmere/l1/l1-s2/status" in topics
    states = [p for t, p, _ in sub.messages if t == "leakfleet/northmere/gateway/gw-test/state"]
    assert states[0] == b"online" and states[-1] == b"offline"  # graceful stop says so
    assert all(journal.backlog("mqtt")[k][0] == 0 for k in ("result", "calibration", "status"))


async def test_status_and_state_are_retained(mosquitto: MosquittoServer, journal: Journal) -> None:
    records = shift(1, 20)
    journal.write(records)
    fwd = make_mqtt("mqtt-r", {"url": mosquitto.url, "client_id": "gw-retain"},
                    ctx(gateway_id="gw-retain", site="retainsite"))
    async with forwarding(fwd, journal):
        await until(lambda: unsent(journal, "mqtt-r") == 0, 20, "statuses sent")
    # a consumer that comes later still learns each station's latest state and the gateway's
    async with MqttLog(mosquitto, "leakfleet/retainsite/#", client_id="late-sub") as late:
        await late.wait_for(lambda m: len(m) >= 7, timeout=10)
    retained = {t: p for t, p, r in late.messages if r}
    assert retained["leakfleet/retainsite/gateway/gw-retain/state"] == b"offline"
    meta = json.loads(retained["leakfleet/retainsite/l2/l2-s1/meta"])  # the names behind ids
    assert meta == {"site": "retainsite", "site_id": "retainsite", "line": "L2", "line_id": "l2",
                    "station": "L2-S1", "station_id": "l2-s1", "gateway_id": "gw-retain"}
    last = json.loads(retained["leakfleet/retainsite/l1/l1-s1/status"])
    assert last["state"] == "calibrating" and last["detail"] == "step 20"  # cycle 20's status


def unsent(journal: Journal, sink: str) -> int:
    return sum(n for n, _ in journal.backlog(sink).values())


async def test_journal_to_influxdb(
    influxdb: InfluxServer, influx_db: str, journal: Journal
) -> None:
    records = shift(1, 40)
    journal.write(records)
    fwd = make_influx("influx", {"url": influxdb.url(influx_db), "batch_size": 50}, ctx())
    async with forwarding(fwd, journal):
        await until(lambda: unsent(journal, "influx") == 0, 20, "every record acknowledged")
    rows = influxdb.query(influx_db, "SELECT * FROM leak_results")
    assert len(rows) == 120
    by_id = {r["record_id"]: r for r in rows}
    for rec in records:
        if not isinstance(rec, TestResult):
            continue
        row = by_id[rec.record_id]
        assert row["leak_rate_sccm"] == rec.leak_rate_sccm
        assert row["part_id"] == rec.part_id
        assert row["verdict"] == rec.verdict.value and row["station"] == rec.station
        whole_s = int(rec.ended_at.timestamp())
        assert row["time"] == whole_s * 10**9 + rec.ended_at.microsecond * 1000
    tags = influxdb.query(influx_db, "SHOW TAG KEYS FROM leak_results")
    assert {t["tagKey"] for t in tags} == {"line", "program", "site", "station", "verdict"}
    counts = influxdb.query(influx_db, "SELECT COUNT(record_id) FROM leak_calibrations")
    assert counts[0]["count"] == 6
    statuses = influxdb.query(influx_db, "SELECT COUNT(state) FROM station_status")
    assert statuses[0]["count"] == 12
