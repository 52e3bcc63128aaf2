"""Alarm changes journal → real Mosquitto (the event stream, the retained open-alarm states,
a broker outage that loses nothing) and → real InfluxDB (``alarm_events``)."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from analytics.alarms import Condition, transitions
from gateway.sinks.influx import make_influx
from gateway.sinks.mqtt import make_mqtt
from gateway.store.journal import Journal
from gateway.store.logbook import Logbook
from tests.integration.sinks_data import ctx, forwarding, until
from tests.support.servers import InfluxServer, MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(90)]

T0 = datetime(2026, 3, 2, 6, 0, tzinfo=UTC)
FAST = {"batch_size": 20, "poll_interval_s": 0.05, "connect_timeout_s": 2, "send_timeout_s": 2,
        "backoff_initial_s": 0.05, "backoff_max_s": 0.5, "drain_timeout_s": 3}
STREAK = Condition("reject-streak:L1-S1", "reject-streak", "L1-S1", "alarm", T0,
                   "5 rejects in a row")
BACKLOG = Condition("sink-backlog:influx", "sink-backlog", None, "warning", T0,
                    "sink influx: 40 record(s) waiting, the oldest for 12 min")
STATION = "leakfleet/{site}/l1/l1-s1/alarm"
STATE = "leakfleet/{site}/l1/l1-s1/alarms/reject-streak-l1-s1"
FLEET_STATE = "leakfleet/{site}/gateway/gw-test/alarms/sink-backlog-influx"


def unsent(journal: Journal, sink: str) -> int:
    return journal.backlog(sink)["alarm"][0]


def events(sub: MqttLog, topic: str) -> list[dict[str, object]]:
    return [json.loads(p) for t, p, _ in sub.messages if t == topic]


async def retained(broker: MosquittoServer, site: str, want: str) -> dict[str, bytes]:
    """What a subscriber that comes now gets at once: the retained messages of the site."""
    async with MqttLog(broker, f"leakfleet/{site}/#", client_id=f"late-{site}") as late:
        await late.wait_for(lambda m: any(t == want for t, _, _ in m), timeout=10)
    return {t: p for t, p, r in late.messages if r}


async def test_raise_ack_clear_reach_the_broker_with_retained_state(
    mosquitto: MosquittoServer, journal: Journal
) -> None:
    site = "alarmsite"
    book = Logbook(journal)
    fwd = make_mqtt("mqtt", {"url": mosquitto.url, "client_id": "gw-alarms", **FAST},
                    ctx(site=site))
    async with (
        MqttLog(mosquitto, f"leakfleet/{site}/#", client_id="alarm-sub") as sub,
        forwarding(fwd, journal),
    ):
        book.apply(transitions([STREAK, BACKLOG], []), T0 + timedelta(minutes=1))
        await until(lambda: unsent(journal, "mqtt") == 0, 20, "raised alarms sent")
        (streak,) = [a for a in book.open_alarms() if a.station == "L1-S1"]
        assert book.acknowledge(streak.id, "Jo", T0 + timedelta(minutes=2))
        await until(lambda: unsent(journal, "mqtt") == 0, 20, "acknowledgement sent")
        # the acknowledged alarm is what a new subscriber sees as open
        now_open = await retained(mosquitto, site, STATE.format(site=site))
        state = json.loads(now_open[STATE.format(site=site)])
        assert (state["state"], state["by"]) == ("acknowledged", "Jo")
        book.apply(transitions([BACKLOG], [a.key for a in book.open_alarms()]),
                   T0 + timedelta(minutes=3))
        await until(lambda: len(events(sub, STATION.format(site=site))) >= 3, 20,
                    "three changes of the streak alarm")
    changes = events(sub, STATION.format(site=site))
    assert [(e["change"], e["state"]) for e in changes] == [
        ("raised", "active"), ("acknowledged", "acknowledged"), ("cleared", "cleared")]
    assert {e["alarm_id"] for e in changes} == {streak.id}
    assert all(e["line"] == "L1" and e["site"] == site for e in changes)
    fleet = events(sub, f"leakfleet/{site}/gateway/gw-test/alarm")
    assert [e["change"] for e in fleet] == ["raised"] and fleet[0]["station"] is None
    # the cleared alarm's retained state is gone (an empty retained message removes it);
    # the still-open fleet alarm's stays
    after = await retained(mosquitto, site, FLEET_STATE.format(site=site))
    assert STATE.format(site=site) not in after
    assert json.loads(after[FLEET_STATE.format(site=site)])["state"] == "active"


async def test_broker_down_then_up_loses_no_alarm_change(tmp_path: Path, journal: Journal
                                                         ) -> None:
    book = Logbook(journal)
    with MosquittoServer(tmp_path / "mqtt") as broker:
        fwd = make_mqtt("mqtt", {"url": broker.url, **FAST}, ctx())
        async with (
            MqttLog(broker, "leakfleet/northmere/#", client_id="outage-alarm-sub") as sub,
            forwarding(fwd, journal),
        ):
            book.apply(transitions([STREAK], []), T0)
            await until(lambda: unsent(journal, "mqtt") == 0, 20, "raise sent")
            broker.stop()
            # the alarm goes through its life while nobody can hear it
            (streak,) = book.open_alarms()
            book.acknowledge(streak.id, "Jo", T0 + timedelta(minutes=1))
            book.apply(transitions([BACKLOG], [streak.key]), T0 + timedelta(minutes=2))
            book.apply(transitions([STREAK], [BACKLOG.key]), T0 + timedelta(minutes=3))
            await until(lambda: fwd.failures > 0, 20, "the sink to notice")
            assert unsent(journal, "mqtt") == 5  # waiting in the journal, not lost
            broker.start()
            await until(lambda: unsent(journal, "mqtt") == 0, 30, "backlog drained")
            want = {e.record_id for _, e in journal.read_after("alarm", 0, 100)}
            await until(lambda: want <= set(sub.records()), 30, "the subscriber has every change")
        got = sub.records()
        assert {k for k, v in got.items() if v.get("kind") == "alarm"} == want
        streak_changes = [v["change"] for v in got.values() if v.get("key") == STREAK.key]
        assert sorted(streak_changes) == sorted(["raised", "acknowledged", "cleared", "raised"])


async def test_alarm_changes_as_influxdb_points(influxdb: InfluxServer, influx_db: str,
                                                journal: Journal) -> None:
    book = Logbook(journal)
    book.apply(transitions([STREAK, BACKLOG], []), T0)
    book.apply(transitions([BACKLOG], [STREAK.key, BACKLOG.key]), T0 + timedelta(minutes=4))
    fwd = make_influx("influx", {"url": influxdb.url(influx_db)}, ctx())
    async with forwarding(fwd, journal):
        await until(lambda: unsent(journal, "influx") == 0, 20, "alarm points acknowledged")
    rows = influxdb.query(influx_db, "SELECT * FROM alarm_events")
    assert sorted((r["key"], r["change"]) for r in rows) == [
        ("reject-streak:L1-S1", "cleared"), ("reject-streak:L1-S1", "raised"),
        ("sink-backlog:influx", "raised")]
    assert {r["line"] for r in rows if r["key"] == STREAK.key} == {"L1"}
