"""Simulated stations → the gateway's Runtime → journal → real Mosquitto and real InfluxDB,
with the sinks switched on by ``[sinks.*]`` tables as a user would write them."""

from __future__ import annotations

import asyncio
import sqlite3
import tomllib
from pathlib import Path

import pytest

from gateway.config import parse_config
from gateway.runtime import Runtime
from gateway.sinks.topics import slug
from tests.sim.small_plant import BASE
from tests.support.journal_check import config_for_plant
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(90)]


def journal_ids(db: Path) -> dict[str, set[str]]:
    with sqlite3.connect(db) as conn:
        return {
            table: {r[0] for r in conn.execute(f"SELECT record_id FROM {table}")}
            for table in ("results", "calibrations", "statuses")
        }


def spb_ids(messages: list[tuple[str, bytes, bool]]) -> set[str]:
    """record ids in the Sparkplug DDATA messages (decoded with the Sparkplug B schema)."""
    from gateway.sinks.sparkplug.payload_pb2 import Payload

    return {m.string_value for t, p, _ in messages if "/DDATA/" in t
            for m in Payload.FromString(p).metrics if m.name.endswith("/record_id")}


async def test_stations_to_broker_and_database(
    tmp_path: Path, mosquitto: MosquittoServer, influxdb: InfluxServer, influx_db: str
) -> None:
    scenario = scenario_from_text(BASE)
    db = tmp_path / "journal.db"
    async with running_plant(scenario, tmp_path, speed=120) as plant:
        text = config_for_plant(plant, f"sqlite:///{db}") + f"""
[sinks.mqtt]
url = "{mosquitto.url}"
poll_interval_s = 0.1

[sinks.influx]
type = "influxdb"
url = "{influxdb.url(influx_db)}"
poll_interval_s = 0.1

[sinks.spb]
type = "sparkplug"
url = "{mosquitto.url}"
poll_interval_s = 0.1
"""
        config = parse_config(tomllib.loads(text), str(tmp_path / "gateway.toml"))
        runtime = Runtime(config)
        stop = asyncio.Event()
        site_level = slug(config.site)  # topic levels are id slugs (docs/gateway-config.md)
        async with (
            MqttLog(mosquitto, f"leakfleet/{site_level}/#", client_id="gw-e2e") as sub,
            MqttLog(mosquitto, f"spBv1.0/{site_level}/#", client_id="gw-e2e-spb") as spb,
        ):
            task = asyncio.create_task(runtime.run(stop))
            try:
                await sub.wait_for(
                    lambda m: sum(t.endswith("/result") for t, _, _ in m) >= 24, timeout=40)
            finally:
                stop.set()
                await asyncio.wait_for(task, 30)
            ids = journal_ids(db)
            everything = set().union(*ids.values())
            await sub.wait_for(lambda m: everything <= set(sub.records()), timeout=10)
            await spb.wait_for(lambda m: everything <= spb_ids(m), timeout=10)
    assert spb_ids(spb.messages) == everything  # Sparkplug DDATA: the same records
    assert len(ids["results"]) >= 24
    got = sub.records()
    assert set(got) == everything  # what the journal has, the broker delivered (de-duplicated)
    states = [p for t, p, _ in sub.messages if t.endswith("/gateway/test-gw/state")]
    assert states[-1] == b"offline"
    for measurement, table in (("leak_results", "results"), ("leak_calibrations",
                                                              "calibrations"),
                               ("station_status", "statuses")):
        rows = influxdb.query(influx_db, f"SELECT record_id FROM {measurement}")
        assert sorted(r["record_id"] for r in rows) == sorted(ids[table])  # exactly once
