"""kill -9 of a gateway that forwards to a real Mosquitto and a real InfluxDB, then a restart:
every journalled record reaches both sinks, none is invented, none is doubled where it counts.

The kill lands while the sinks are busy (results stream in and are being published), so some
batches were acknowledged by the broker or the database but their cursor was not persisted yet.
Delivery is at-least-once: the restarted forwarder re-sends those. The MQTT consumer sees each
``record_id`` at least once (a repeat is harmless: de-duplicate on ``record_id``, the payload is
the same); InfluxDB holds each record exactly once, because a re-sent point has the same
timestamp and tags and overwrites itself (InfluxDB 1.x line-protocol semantics: a point is
identified by measurement, tag set and timestamp).
"""

from __future__ import annotations

import asyncio
import json
import signal
import sqlite3
import uuid
from pathlib import Path

import pytest

from tests.faults.gw import Gateway
from tests.sim.small_plant import BASE
from tests.support.journal_check import config_for_plant
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(150)]
TABLES = (("leak_results", "results"), ("leak_calibrations", "calibrations"),
          ("station_status", "statuses"))  # fmt: skip


def _journal_ids(db: Path) -> dict[str, list[str]]:
    with sqlite3.connect(db) as conn:
        return {t: sorted(r[0] for r in conn.execute(f"SELECT record_id FROM {t}"))
                for _, t in TABLES}  # fmt: skip


async def test_kill_9_with_sinks_then_restart(
    tmp_path: Path, mosquitto: MosquittoServer, influxdb: InfluxServer, influx_db: str
) -> None:
    db = tmp_path / "journal.db"
    async with running_plant(scenario_from_text(BASE), tmp_path, speed=20.0) as plant:
        cfg = tmp_path / "gateway.toml"
        # a site of its own: the session's broker keeps other tests' retained statuses
        site = f"northmere-kill9-{uuid.uuid4().hex[:6]}"
        text = config_for_plant(plant, f"sqlite:///{db}")
        text = text.replace(f'site = "{plant.scenario.site}"', f'site = "{site}"', 1)
        assert f'site = "{site}"' in text
        cfg.write_text(text + f"""
[sinks.mqtt]
url = "{mosquitto.url}"

[sinks.influx]
type = "influxdb"
url = "{influxdb.url(influx_db)}"
""")
        names = [s.name for s in plant.scenario.stations]

        def results(msgs: list[tuple[str, bytes, bool]]) -> int:
            """Distinct results on the broker (a re-send after the kill is one result)."""
            return len({json.loads(p)["record_id"] for t, p, _ in msgs if t.endswith("/result")})

        async with MqttLog(mosquitto, f"leakfleet/{site}/#", client_id=f"sub-{site}") as sub:
            gw = Gateway(cfg, tmp_path / "gateway.log")
            try:
                await gw.start()
                await gw.wait_for_text("-> online", len(names))
                await sub.wait_for(lambda m: results(m) >= 8, timeout=60)  # sinks mid-stream
                assert gw.proc is not None
                gw.proc.send_signal(signal.SIGKILL)
                await gw.proc.wait()
                before = results(sub.messages)
                await asyncio.sleep(1.0)
                gw2 = Gateway(cfg, tmp_path / "gateway2.log")
                await gw2.start()
                await gw2.wait_for_text("-> online", len(names))
                await sub.wait_for(lambda m: results(m) >= before + 8, timeout=60)
                assert await gw2.stop() == 0, gw2.text()[-2000:]
            finally:
                await gw.ensure_dead()
            assert gw.proc.returncode == -signal.SIGKILL
            ids = _journal_ids(db)
            everything = {i for v in ids.values() for i in v}
            await sub.wait_for(lambda m: everything <= set(sub.records()), timeout=20)

    assert len(ids["results"]) >= 16
    got = sub.records()
    # every journalled record reached the broker and the broker carried nothing else ...
    assert set(got) == everything
    # ... and a repeat, if any, is the same payload under the same record_id
    seen: dict[str, bytes] = {}
    for topic, payload, _ in sub.messages:
        if "/gateway/" in topic or topic.endswith("/meta"):  # state and display names
            continue
        rid = json.loads(payload)["record_id"]
        assert seen.setdefault(rid, payload) == payload, rid
    for measurement, table in TABLES:
        rows = influxdb.query(influx_db, f"SELECT record_id FROM {measurement}")
        assert sorted(r["record_id"] for r in rows) == ids[table], measurement  # exactly once
