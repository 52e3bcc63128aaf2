"""Alarm events on the sinks: MQTT topics and payloads, InfluxDB points, and the sinks that
do not carry them (Sparkplug, OPC UA) leaving them alone."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import pytest

from gateway.influxdb.lineprotocol import record_line
from gateway.records import AlarmEvent
from gateway.runtime import _kinds_of
from gateway.sinks.mqtt import MqttClient, MqttOptions, make_mqtt
from gateway.sinks.opcua import SHOWN_KINDS
from gateway.sinks.sparkplug.node import make_sparkplug
from tests.integration.sinks_data import ctx

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def event(change: str = "raised", station: str | None = "L1-S1",
          key: str = "reject-streak:L1-S1") -> AlarmEvent:
    return AlarmEvent(3, key, key.split(":")[0], station, "alarm", "5 rejects in a row", change,
                      T0 + timedelta(minutes=2), T0, "Jo" if change == "acknowledged" else None)


def client(**options: object) -> MqttClient:
    c = ctx()
    return MqttClient(MqttOptions.from_options({"url": "mqtt://h", **options}, c), c, "m")


def test_station_alarms_go_under_their_station_fleet_alarms_under_the_gateway() -> None:
    m = client()
    assert m.topic(event()) == "leakfleet/northmere/l1/l1-s1/alarm"
    assert m.alarm_state_topic(event()) == (
        "leakfleet/northmere/l1/l1-s1/alarms/reject-streak-l1-s1")
    fleet = event(station=None, key="sink-backlog:influx")
    assert m.topic(fleet) == "leakfleet/northmere/gateway/gw-test/alarm"
    assert m.alarm_state_topic(fleet) == (
        "leakfleet/northmere/gateway/gw-test/alarms/sink-backlog-influx")
    # a station no longer in the config still gets a topic
    assert m.topic(event(station="OLD-1", key="silent:OLD-1")) == (
        "leakfleet/northmere/_/old-1/alarm")
    old = client(topic_style="names")
    assert old.topic(event()) == "leakfleet/northmere/L1/L1-S1/alarm"
    assert old.alarm_state_topic(event()) == (
        "leakfleet/northmere/L1/L1-S1/alarms/reject-streak:L1-S1")


def test_alarm_payload_says_state_line_and_site() -> None:
    m = client()
    for change, state in (("raised", "active"), ("acknowledged", "acknowledged"),
                          ("cleared", "cleared")):
        doc = json.loads(json.dumps(m.payload(event(change))))
        assert (doc["kind"], doc["change"], doc["state"]) == ("alarm", change, state)
        assert (doc["line"], doc["station"], doc["site"]) == ("L1", "L1-S1", "northmere")
        assert doc["since"].startswith("2026-12-03T08:00:00")
    assert m.payload(event("acknowledged"))["by"] == "Jo"
    fleet = m.payload(event(station=None, key="sink-backlog:influx"))
    assert fleet["station"] is None and fleet["line"] is None


def test_mqtt_forwards_alarms_by_default_and_takes_them_out_on_request() -> None:
    assert "alarm" in make_mqtt("m", {"url": "mqtt://h"}, ctx()).client.kinds
    only = make_mqtt("m", {"url": "mqtt://h", "kinds": ["alarm"]}, ctx())
    assert only.client.kinds == ("alarm",)
    assert "alarm" not in make_mqtt("m", {"url": "mqtt://h", "kinds": ["result"]},
                                    ctx()).client.kinds


def test_sparkplug_and_opcua_do_not_carry_alarm_events_nor_hold_them_back() -> None:
    spb = make_sparkplug("spb", {"url": "mqtt://h"}, ctx())
    assert "alarm" not in spb.client.kinds and "alarm" not in SHOWN_KINDS
    with pytest.raises(ValueError, match="DDATA"):
        make_sparkplug("spb", {"url": "mqtt://h", "kinds": ["alarm"]}, ctx())
    # the retention task prunes a kind by the cursors of the sinks that forward it only
    assert "alarm" not in _kinds_of(spb)


def test_influx_point_per_alarm_change() -> None:
    line = record_line(event("acknowledged"), site="nw", line="L1", seq=9)
    head, rest = line.split(" ", 1)
    fields, ts = rest.rsplit(" ", 1)
    # line protocol: measurement,tags (sorted by key) fields timestamp (InfluxDB 1.x reference)
    assert head == ("alarm_events,change=acknowledged,key=reject-streak:L1-S1,line=L1,"
                    "rule=reject-streak,severity=alarm,site=nw,station=L1-S1")
    assert 'by="Jo"' in fields and "alarm_id=3i" in fields and 'state="acknowledged"' in fields
    assert int(ts) == int((T0 + timedelta(minutes=2)).timestamp()) * 10**9
    fleet = record_line(event(station=None, key="sink-backlog:influx"), site="nw")
    assert "station=" not in fleet.split(" ")[0] and "line=" not in fleet.split(" ")[0]
