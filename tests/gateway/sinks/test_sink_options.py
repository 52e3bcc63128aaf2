"""Sink tables and URLs: mistakes are one clear ValueError; secrets never come from config."""

from __future__ import annotations

import json

import pytest

from gateway import metrics
from gateway.influxdb.http import parse_influx_url
from gateway.records import SCHEMA_VERSION, record_from_dict
from gateway.sinks import REGISTRY
from gateway.sinks.cli import sinks_from_cli
from gateway.sinks.influx import make_influx
from gateway.sinks.mqtt import MqttClient, MqttOptions, make_mqtt, parse_mqtt_url, topic_for
from tests.integration.sinks_data import ctx, result, status


def test_registry_names() -> None:
    assert {"mqtt", "influxdb", "influx"} <= set(REGISTRY)


def test_mqtt_urls() -> None:
    assert parse_mqtt_url("mqtt://broker") == ("broker", 1883, False)
    assert parse_mqtt_url("mqtts://broker") == ("broker", 8883, True)
    assert parse_mqtt_url("mqtt://127.0.0.1:1999") == ("127.0.0.1", 1999, False)
    for bad in ("http://x", "mqtt://", "mqtt://h:1/path", "mqtt://u:pw@h:1"):
        with pytest.raises(ValueError):
            parse_mqtt_url(bad)


def test_mqtt_password_never_from_config() -> None:
    with pytest.raises(ValueError, match="LEAKFLEET_MQTT_PASSWORD"):
        make_mqtt("m", {"url": "mqtt://h", "password": "x"}, ctx())
    with pytest.raises(ValueError, match="unknown key"):
        make_mqtt("m", {"url": "mqtt://h", "colour": "x"}, ctx())
    with pytest.raises(ValueError, match="mqtts"):
        make_mqtt("m", {"url": "mqtt://h", "ca_file": "/ca.pem"}, ctx())
    with pytest.raises(ValueError, match="go together"):
        make_mqtt("m", {"url": "mqtts://h", "cert_file": "/c.pem"}, ctx())


def test_topics_and_payload_schema() -> None:
    c = ctx()
    client = MqttClient(MqttOptions.from_options({"url": "mqtt://h"}, c), c, "m")
    r = result("L1-S1", 4)
    assert client.topic(r) == "leakfleet/northmere/l1/l1-s1/result"
    assert client.topic(status("L2-S1", 1, "idle")) == "leakfleet/northmere/l2/l2-s1/status"
    assert client.state_topic == "leakfleet/northmere/gateway/gw-test/state"
    assert topic_for("lf", "a/b", "L+1", "S#1", "result") == "lf/a_b/L_1/S_1/result"
    assert client.opts.client_id == "leakfleet-gw-test"
    payload = json.loads(json.dumps(r.to_dict()))
    assert payload["schema"] == SCHEMA_VERSION and payload["record_id"] == r.record_id
    assert record_from_dict(payload) == r  # a consumer rebuilds the canonical record


def test_topic_levels_are_id_slugs() -> None:
    c = ctx(site="Northmere Works", gateway_id="NW L1 GW",
            stations={"Leak Bench #2": "Line 1", "L1-S1": "Line 1"})
    client = MqttClient(MqttOptions.from_options({"url": "mqtt://h"}, c), c, "m")
    assert client.topic(result("L1-S1", 3, line="Line 1")) == (
        "leakfleet/northmere-works/line-1/l1-s1/result")
    assert client.state_topic == "leakfleet/northmere-works/gateway/nw-l1-gw/state"
    topics = dict(client.meta_messages())
    meta = json.loads(topics["leakfleet/northmere-works/line-1/leak-bench--2/meta"])
    assert meta["station"] == "Leak Bench #2" and meta["site"] == "Northmere Works"
    site_id = {"url": "mqtt://h", "site_id": "nw"}
    assert MqttClient(MqttOptions.from_options(site_id, c), c, "m").topic(
        result("L1-S1", 3, line="Line 1")).startswith("leakfleet/nw/line-1/")
    old = MqttClient(MqttOptions.from_options({"url": "mqtt://h", "topic_style": "names"}, c),
                     c, "m")
    assert old.topic(result("L1-S1", 3, line="Line 1")) == (
        "leakfleet/Northmere Works/Line 1/L1-S1/result")
    assert old.meta_messages() == []
    r = result("L1-S1", 3, line="Line 1")
    assert client.payload(r) == {**r.to_dict(), "site": "Northmere Works"}
    assert old.payload(r) == r.to_dict()  # the older payload, unchanged


def test_topic_slug_collisions_are_refused() -> None:
    c = ctx(stations={"L1 S1": "L1", "L1-S1": "L1"})
    with pytest.raises(ValueError, match="'L1 S1' and 'L1-S1' both map to topic level 'l1-s1'"):
        make_mqtt("m", {"url": "mqtt://h"}, c)
    make_mqtt("m", {"url": "mqtt://h", "topic_style": "names"}, c)  # names: no slugs
    with pytest.raises(ValueError, match="topic_style"):
        make_mqtt("m", {"url": "mqtt://h", "topic_style": "slug"}, ctx())
    with pytest.raises(ValueError, match="site_id"):
        make_mqtt("m", {"url": "mqtt://h", "site_id": "North Mere"}, ctx())
    with pytest.raises(ValueError, match="no usable topic level"):
        make_mqtt("m", {"url": "mqtt://h"}, ctx(site="***"))


def test_influx_urls() -> None:
    v1 = parse_influx_url("influxdb://db.example:8086/leakfleet?rp=one_year")
    assert (v1.version, v1.database, v1.retention_policy, v1.port) == (1, "leakfleet",
                                                                       "one_year", 8086)
    v2 = parse_influx_url("influxdb2://db.example?org=northmere&bucket=leak&tls=true")
    assert (v2.version, v2.org, v2.database, v2.tls) == (2, "northmere", "leak", True)
    assert v2.base_url == "https://db.example:8086"
    for bad in ("influxdb://h", "influxdb2://h?org=o", "influxdb://u:p@h/db", "http://h/db",
                "influxdb://h/db?x=1"):
        with pytest.raises(ValueError):
            parse_influx_url(bad)


def test_influx_token_never_from_config() -> None:
    with pytest.raises(ValueError, match="LEAKFLEET_INFLUX_TOKEN"):
        make_influx("i", {"url": "influxdb2://h?org=o&bucket=b", "token": "t"}, ctx())


def test_cli_flags_to_sink_tables() -> None:
    assert sinks_from_cli(None, None) == {}
    got = sinks_from_cli("mqtts://broker:8883", "influxdb://h:8086/lf",
                         {"mqtt": {"type": "mqtt", "url": "mqtt://old", "ca_file": "/ca"}})
    assert got["mqtt"] == {"type": "mqtt", "url": "mqtts://broker:8883", "ca_file": "/ca"}
    assert got["influx"] == {"type": "influxdb", "url": "influxdb://h:8086/lf"}
    with pytest.raises(ValueError, match="--influx"):
        sinks_from_cli(None, "influxdb://h")


def test_metrics_endpoint_on_loopback() -> None:
    import urllib.request

    metrics.records_received("L1-S1", "result", 3)
    metrics.records_rejected("L1-S1")
    metrics.station_state("L1-S1", "testing")
    metrics.poll_latency("L1-S1", 0.02)
    server = metrics.serve(0)
    try:
        assert server.host == "127.0.0.1"
        with urllib.request.urlopen(server.url, timeout=5) as resp:
            text = resp.read().decode()
    finally:
        server.close()
    assert 'leakfleet_records_received_total{kind="result",station="L1-S1"} 3.0' in text
    assert 'leakfleet_station_state{leakfleet_station_state="testing",station="L1-S1"} 1.0' in text
    assert "leakfleet_poll_latency_seconds_bucket" in text


def test_missing_server_skips_locally_and_fails_in_ci(monkeypatch: pytest.MonkeyPatch) -> None:
    from tests.support import servers

    monkeypatch.setattr(servers.shutil, "which", lambda *a, **k: None)
    monkeypatch.delenv("CI", raising=False)
    with pytest.raises(pytest.skip.Exception, match="apt-get install mosquitto"):
        servers.require_binary("mosquitto")
    monkeypatch.setenv("CI", "true")
    with pytest.raises(pytest.fail.Exception, match="CI must provide real servers"):
        servers.require_binary("influxd")
