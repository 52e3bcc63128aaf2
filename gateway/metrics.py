"""Prometheus metrics for the gateway: plain functions the runtime and forwarders call.

The metrics always exist in this module's own registry (updating one is a dict lookup and an
add, cheap enough to call per record); they are only *served* when ``serve(port)`` is called,
which the runtime does when ``[metrics] prometheus_port`` is non-zero (off by default). The
endpoint binds 127.0.0.1 unless configured otherwise, because a plant network is not the place
to publish production counts by accident.

    from gateway import metrics
    metrics.records_received("L1-S1", "result")
    metrics.station_state("L1-S1", "testing")
    handle = metrics.serve(9464)      # http://127.0.0.1:9464/metrics
    handle.close()
"""

from __future__ import annotations

import logging
import threading
from dataclasses import dataclass
from typing import Any

from prometheus_client import CollectorRegistry, Counter, Enum, Gauge, Histogram
from prometheus_client.exposition import generate_latest, start_http_server

from gateway.records import StationState

__all__ = [
    "REGISTRY",
    "MetricsServer",
    "StationMetrics",
    "exposition",
    "for_station",
    "kept_aside",
    "poll_latency",
    "records_received",
    "records_rejected",
    "records_stored",
    "serve",
    "sink_backlog",
    "sink_connected",
    "sink_error",
    "sink_sent",
    "station_error",
    "station_state",
]

log = logging.getLogger(__name__)

REGISTRY = CollectorRegistry(auto_describe=True)

_received = Counter(
    "leakfleet_records_received", "Records parsed from a station (before the journal)",
    ["station", "kind"], registry=REGISTRY,
)
_stored = Counter(
    "leakfleet_records_stored", "Records newly committed to the journal",
    ["station", "kind"], registry=REGISTRY,
)
_rejected = Counter(
    "leakfleet_records_rejected", "Station input quarantined with a reason",
    ["station"], registry=REGISTRY,
)
_kept_aside = Counter(
    "leakfleet_records_kept_aside",
    "Journal findings per station: conflict (a re-send that differs), gap (lost cycles)",
    ["station", "what"], registry=REGISTRY,
)
_station_errors = Counter(
    "leakfleet_station_errors", "Failed polls, reads or connections per station",
    ["station"], registry=REGISTRY,
)
_state = Enum(
    "leakfleet_station_state", "Last known station state",
    ["station"], states=[s.value for s in StationState], registry=REGISTRY,
)
_poll = Histogram(
    "leakfleet_poll_latency_seconds", "Time from request to complete answer, per station",
    ["station"], registry=REGISTRY,
    buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0),
)
_sink_sent = Counter(
    "leakfleet_sink_sent", "Records a sink acknowledged", ["sink", "kind"], registry=REGISTRY,
)
_sink_batch = Histogram(
    "leakfleet_sink_batch_seconds", "Time from sending a batch to its acknowledgement",
    ["sink"], registry=REGISTRY,
)
_sink_errors = Counter(
    "leakfleet_sink_errors", "Failed connects or sends per sink", ["sink"], registry=REGISTRY,
)
_sink_backlog = Gauge(
    "leakfleet_sink_backlog_records", "Journalled records the sink has not acknowledged yet",
    ["sink", "kind"], registry=REGISTRY,
)
_sink_age = Gauge(
    "leakfleet_sink_backlog_oldest_seconds", "Age of the oldest record waiting for the sink",
    ["sink", "kind"], registry=REGISTRY,
)
_sink_up = Gauge(
    "leakfleet_sink_connected", "1 while the sink is connected", ["sink"], registry=REGISTRY,
)


def records_received(station: str, kind: str, n: int = 1) -> None:
    _received.labels(station, kind).inc(n)


def records_stored(station: str, kind: str, n: int = 1) -> None:
    _stored.labels(station, kind).inc(n)


def records_rejected(station: str, n: int = 1) -> None:
    _rejected.labels(station).inc(n)


def kept_aside(station: str, what: str, n: int = 1) -> None:
    """A conflicting re-send or a recorded gap, counted per station."""
    _kept_aside.labels(station, what).inc(n)


def station_error(station: str, n: int = 1) -> None:
    _station_errors.labels(station).inc(n)


def station_state(station: str, state: str | StationState) -> None:
    _state.labels(station).state(StationState(state).value)


def poll_latency(station: str, seconds: float) -> None:
    _poll.labels(station).observe(max(0.0, seconds))


def sink_sent(sink: str, kind: str, n: int, seconds: float | None = None) -> None:
    _sink_sent.labels(sink, kind).inc(n)
    if seconds is not None:
        _sink_batch.labels(sink).observe(max(0.0, seconds))


def sink_error(sink: str) -> None:
    _sink_errors.labels(sink).inc()


def sink_backlog(sink: str, kind: str, count: int, oldest_age_s: float) -> None:
    _sink_backlog.labels(sink, kind).set(count)
    _sink_age.labels(sink, kind).set(oldest_age_s)


def sink_connected(sink: str, up: bool) -> None:
    _sink_up.labels(sink).set(1 if up else 0)


RECEIVED_KINDS = ("result", "calibration", "status", "rejected")
STORED_KINDS = ("result", "calibration", "status")


@dataclass(frozen=True, slots=True)
class StationMetrics:
    """One station's counter children, bound once.

    ``labels()`` takes the metric's lock and hashes the label tuple on every call; the runtime
    updates these per record, so it keeps the children (an ``inc`` is then one small lock in
    prometheus-client's value). Binding also makes every series exist at 0 from the start.
    """

    station: str
    received: dict[str, Any]  # kind (RECEIVED_KINDS) -> counter child
    stored: dict[str, Any]  # kind (STORED_KINDS) -> counter child
    rejected: Any
    errors: Any
    poll: Any  # histogram child

    def state(self, state: str | StationState) -> None:
        station_state(self.station, state)  # rare (state changes): no child to keep


_stations: dict[str, StationMetrics] = {}
_stations_lock = threading.Lock()


def for_station(station: str) -> StationMetrics:
    """The cached children of ``station`` (created on first use)."""
    m = _stations.get(station)
    if m is None:
        with _stations_lock:
            m = _stations.get(station)
            if m is None:
                m = StationMetrics(
                    station=station,
                    received={k: _received.labels(station, k) for k in RECEIVED_KINDS},
                    stored={k: _stored.labels(station, k) for k in STORED_KINDS},
                    rejected=_rejected.labels(station),
                    errors=_station_errors.labels(station),
                    poll=_poll.labels(station),
                )
                _stations[station] = m
    return m


def exposition() -> bytes:
    """The text format a scrape would get (for tests and ``--check`` style dumps)."""
    return bytes(generate_latest(REGISTRY))


@dataclass
class MetricsServer:
    """A running endpoint; ``close()`` stops it."""

    host: str
    port: int
    _server: Any
    _thread: threading.Thread

    @property
    def url(self) -> str:
        return f"http://{self.host}:{self.port}/metrics"

    def close(self) -> None:
        self._server.shutdown()
        self._server.server_close()
        self._thread.join(timeout=5)


def serve(port: int, bind: str = "127.0.0.1") -> MetricsServer:
    """Serve ``/metrics`` on ``bind:port`` in a daemon thread (port 0: any free port)."""
    if not 0 <= port <= 65535:
        raise ValueError(f"metrics port must be 0..65535, got {port}")
    server, thread = start_http_server(port, addr=bind, registry=REGISTRY)
    actual = int(server.server_address[1])
    log.info("metrics: serving http://%s:%d/metrics", bind, actual)
    return MetricsServer(bind, actual, server, thread)
