"""Pressure curves flow journal → real Mosquitto and → real InfluxDB like the other records:
one message / one point per curve, every sample back exactly, and a curve kept for a shorter
time than results goes only once every sink that forwards curves has it."""

from __future__ import annotations

import json
import random
from datetime import UTC, datetime, timedelta

import pytest

from gateway.records import PressureTrace
from gateway.sinks.influx import make_influx
from gateway.sinks.mqtt import make_mqtt
from gateway.store.journal import Journal
from tests.integration.sinks_data import ctx, forwarding, until
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def curve(cycle: int, role: str = "result", n: int = 600) -> PressureTrace:
    rng = random.Random(cycle)
    p = [350_000.0 - 0.0123 * i + rng.gauss(0, 0.3) for i in range(n)]
    end = T0 + timedelta(minutes=cycle)
    return PressureTrace(station="L1-S1", line="L1", cycle=cycle, ended_at=end, received_at=end,
                         started_at=end - timedelta(seconds=(n - 1) * 0.05),
                         sample_interval_s=0.05, pressures_pa=tuple(p), role=role,
                         program="HX-210",
                         phases=(("fill", 0.0), ("stabilise", 3.0), ("test", 11.0),
                                 ("dump", 21.0), ("end", (n - 1) * 0.05)))


async def test_curves_to_mqtt_and_influxdb(mosquitto: MosquittoServer, influxdb: InfluxServer,
                                           influx_db: str, journal: Journal) -> None:
    curves = [curve(1), curve(2), curve(2, "master"), curve(2, "standard")]
    journal.write(curves)
    mqtt = make_mqtt("mqtt", {"url": mosquitto.url}, ctx())
    influx = make_influx("influx", {"url": influxdb.url(influx_db)}, ctx())
    async with (
        MqttLog(mosquitto, "leakfleet/northmere/+/+/trace", client_id="curve-sub") as sub,
        forwarding(mqtt, journal),
        forwarding(influx, journal),
    ):
        await until(lambda: len(sub.records()) >= len(curves), 20, "every curve on MQTT")
        await until(lambda: journal.backlog("influx")["trace"][0] == 0, 20, "curves in InfluxDB")
    got = sub.records()
    for c in curves:
        message = got[c.record_id]
        assert message["kind"] == "trace" and message["role"] == c.role
        assert tuple(message["pressures_pa"]) == c.pressures_pa  # JSON doubles round-trip
        assert PressureTrace.from_dict(message) == c
    rows = influxdb.query(influx_db, "SELECT * FROM pressure_traces")
    assert len(rows) == len(curves)  # one point per curve, not one per sample
    by_id = {r["record_id"]: r for r in rows}
    for c in curves:
        row = by_id[c.record_id]
        assert (row["role"], row["station"], row["program"]) == (c.role, "L1-S1", "HX-210")
        assert row["samples"] == len(c.pressures_pa)
        assert tuple(float(v) for v in row["pressures_pa"].split(",")) == c.pressures_pa
        assert json.loads(row["phases"]) == [list(p) for p in c.phases]


async def test_curves_go_sooner_than_results_once_the_sinks_that_carry_them_have_them(
    mosquitto: MosquittoServer, journal: Journal
) -> None:
    from tests.integration.sinks_data import shift

    results = shift(1, 5)
    journal.write([*results, curve(1), curve(2)])
    # a sink that forwards results only must not hold the curves back
    mqtt = make_mqtt("results-only", {"url": mosquitto.url, "kinds": ["result"]}, ctx())
    async with forwarding(mqtt, journal):
        await until(lambda: journal.backlog("results-only")["result"][0] == 0, 20, "results")
    sinks = {"result": ["results-only"], "calibration": [], "status": [], "trace": []}
    cutoff = datetime.now(UTC) + timedelta(days=1)  # every curve is older than its retention
    removed = journal.prune(None, sinks, kind_cutoffs={"trace": cutoff})  # results: kept
    assert removed == 2
    assert journal.read_after("trace", 0, 10) == []
    assert len(journal.read_after("result", 0, 100)) == len(
        [r for r in results if r.kind == "result"])
