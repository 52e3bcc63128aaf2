"""``--mqtt`` / ``--influx`` on the command line → ``[sinks.<name>]`` tables for the runtime.

The flags switch a sink on without editing a config; a config table of the same name keeps its
other keys (username, ca_file, ...) and only its ``url`` is replaced. Credentials never come
from the command line: ``LEAKFLEET_MQTT_PASSWORD``, ``LEAKFLEET_INFLUX_TOKEN`` /
``LEAKFLEET_INFLUX_PASSWORD`` (a user name may ride in the URL: ``mqtt://gw-l1@host:1883``).
"""

from __future__ import annotations

import argparse
import dataclasses
from collections.abc import Mapping
from typing import Any, TypeVar

from gateway.influxdb.http import parse_influx_url
from gateway.sinks.mqtt import parse_mqtt_url

__all__ = ["add_sink_arguments", "sinks_from_cli", "with_cli_sinks"]

MQTT_SINK = "mqtt"
INFLUX_SINK = "influx"


def add_sink_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--mqtt", metavar="URL",
        help="forward to an MQTT broker: mqtt://host:1883 or mqtts://host:8883 "
             "(password from LEAKFLEET_MQTT_PASSWORD)",
    )
    parser.add_argument(
        "--influx", metavar="URL",
        help="forward to InfluxDB: influxdb://host:8086/database or "
             "influxdb2://host:8086?org=ORG&bucket=BUCKET (token from LEAKFLEET_INFLUX_TOKEN)",
    )


def sinks_from_cli(
    mqtt_url: str | None,
    influx_url: str | None,
    existing: Mapping[str, Mapping[str, Any]] | None = None,
) -> dict[str, dict[str, Any]]:
    """Sink tables for the flags given (ValueError naming the flag for a bad URL)."""
    existing = existing or {}
    out: dict[str, dict[str, Any]] = {}
    if mqtt_url:
        try:
            parse_mqtt_url(mqtt_url)
        except ValueError as exc:
            raise ValueError(f"--mqtt: {exc}") from None
        out[MQTT_SINK] = {"type": "mqtt", **existing.get(MQTT_SINK, {}), "url": mqtt_url}
    if influx_url:
        try:
            parse_influx_url(influx_url)
        except ValueError as exc:
            raise ValueError(f"--influx: {exc}") from None
        out[INFLUX_SINK] = {"type": "influxdb", **existing.get(INFLUX_SINK, {}), "url": influx_url}
    return out


C = TypeVar("C")


def with_cli_sinks(config: C, mqtt_url: str | None, influx_url: str | None) -> C:
    """``config`` (a GatewayConfig dataclass) with the flags' sinks added or re-pointed."""
    current: Mapping[str, Mapping[str, Any]] = getattr(config, "sinks", {})
    extra = sinks_from_cli(mqtt_url, influx_url, current)
    if not extra:
        return config
    return dataclasses.replace(config, sinks={**current, **extra})  # type: ignore[type-var]
