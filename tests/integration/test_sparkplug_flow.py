"""Sparkplug B: journal → real Mosquitto → a host application that decodes every payload.

The host application here is a plain aiomqtt subscriber to ``spBv1.0/#``; it decodes with the
Sparkplug B payload schema and checks what the specification (Eclipse Sparkplug 3.0) asks of
an edge node: NBIRTH with seq 0 and bdSeq first, a DBIRTH per device before its DDATA, seq
one more per message modulo 256, NDEATH (the MQTT last will) with the bdSeq of the birth it
ends when the connection dies, and births again on an NCMD ``Node Control/Rebirth``.
"""

from __future__ import annotations

import asyncio
import contextlib
import itertools
import socket
from collections.abc import AsyncIterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

from gateway.records import TestResult
from gateway.sinks.sparkplug.metrics import BD_SEQ, REBIRTH, DataType
from gateway.sinks.sparkplug.node import SparkplugClient, make_sparkplug
from gateway.sinks.sparkplug.payload_pb2 import Payload
from gateway.store.journal import Journal
from tests.integration.sinks_data import STATIONS, ctx, forwarding, shift, until
from tests.support.servers import HOST, MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(90)]


@dataclass
class Msg:
    topic: str
    type: str  # NBIRTH, DBIRTH, DDATA, NDEATH, ...
    device: str | None
    payload: Any

    def metric(self, name: str) -> Any:
        return next(m for m in self.payload.metrics if m.name == name)


@contextlib.asynccontextmanager
async def host_app(broker: MosquittoServer, group: str) -> AsyncIterator[list[Msg]]:
    import aiomqtt

    seen: list[Msg] = []
    ready = asyncio.Event()

    async def listen() -> None:
        async with aiomqtt.Client(HOST, broker.port, identifier=f"host-{group}") as client:
            await client.subscribe(f"spBv1.0/{group}/#", qos=1)
            ready.set()
            async for m in client.messages:
                parts = str(m.topic).split("/")  # spBv1.0/group/TYPE/node[/device]
                assert isinstance(m.payload, bytes)
                seen.append(Msg(str(m.topic), parts[2], parts[4] if len(parts) > 4 else None,
                                Payload.FromString(m.payload)))

    task = asyncio.create_task(listen())
    async with asyncio.timeout(10):
        await ready.wait()
    try:
        yield seen
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task


async def ncmd_rebirth(broker: MosquittoServer, topic: str) -> None:
    import aiomqtt

    cmd = Payload()
    m = cmd.metrics.add()
    m.name, m.datatype, m.boolean_value = REBIRTH, int(DataType.Boolean), True
    async with aiomqtt.Client(HOST, broker.port, identifier="host-cmd") as client:
        await client.publish(topic, cmd.SerializeToString(), qos=1)


async def test_births_data_in_seq_death_and_rebirth(
    mosquitto: MosquittoServer, journal: Journal
) -> None:
    records = shift(1, 90)  # 270 results + statuses + calibrations: seq wraps past 255
    journal.write(records)
    c = ctx(site="Spb Flow")
    fwd = make_sparkplug("spb", {"url": mosquitto.url, "batch_size": 40}, c)
    client = fwd.client
    assert isinstance(client, SparkplugClient)
    devices = {s.lower() for s in STATIONS}
    async with host_app(mosquitto, "spb-flow") as seen:
        async with forwarding(fwd, journal):
            await until(lambda: sum(m.type == "DDATA" for m in seen) >= len(records), 30,
                        "a DDATA per journalled record")
            # births first: NBIRTH (seq 0, bdSeq 0), then one DBIRTH per station
            assert [m.type for m in seen[:4]] == ["NBIRTH", "DBIRTH", "DBIRTH", "DBIRTH"]
            assert seen[0].payload.seq == 0 and seen[0].metric(BD_SEQ).long_value == 0
            assert seen[0].metric(REBIRTH).boolean_value is False
            assert {m.device for m in seen[1:4]} == devices
            birth = seen[1]
            leak = birth.metric("Result/leak_rate")
            assert leak.datatype == DataType.Double and leak.is_null
            assert dict(zip(leak.properties.keys, [v.string_value for v in leak.properties.values],
                            strict=True)) == {"engUnit": "sccm"}
            assert birth.metric("Properties/station").string_value in STATIONS
            # every message after NBIRTH: seq one more than the last, modulo 256
            seqs = [m.payload.seq for m in seen]
            assert all(b == (a + 1) % 256 for a, b in itertools.pairwise(seqs))
            assert max(seqs) == 255 and seqs.count(0) >= 2  # it wrapped
            # DDATA in journal order, each result's values as journalled
            data = [m for m in seen if m.type == "DDATA"]
            results = [r for r in records if isinstance(r, TestResult)]
            got = [m for m in data if any(x.name == "Result/record_id" for x in m.payload.metrics)]
            assert [m.metric("Result/record_id").string_value for m in got] == [
                r.record_id for r in results]
            for m, r in zip(got, results, strict=True):
                assert m.device == r.station.lower()
                assert m.metric("Result/leak_rate").double_value == r.leak_rate_sccm
                assert m.metric("Result/verdict").string_value == r.verdict.value
                at_ms = round(r.ended_at.timestamp() * 1000)
                assert m.metric("Result/ended_at").long_value == at_ms

            # a host application asks for a rebirth: NBIRTH (seq 0, same bdSeq) and DBIRTHs again
            n = len(seen)
            await ncmd_rebirth(mosquitto, "spBv1.0/spb-flow/NCMD/gw-test")
            await until(lambda: sum(m.type == "DBIRTH" for m in seen[n:]) == 3, 15, "rebirth")
            again = [m for m in seen[n:] if m.type != "NCMD"]  # the host hears its own NCMD too
            assert again[0].type == "NBIRTH" and again[0].payload.seq == 0
            assert again[0].metric(BD_SEQ).long_value == 0
            assert [m.payload.seq for m in again[1:4]] == [1, 2, 3]
            last = next(r for r in reversed(results) if r.station == "L1-S1")
            l1s1 = next(m for m in again[1:4] if m.device == "l1-s1")  # latest values in it
            assert l1s1.metric("Result/record_id").string_value == last.record_id
            assert l1s1.metric("Result/leak_rate").double_value == last.leak_rate_sccm

            # the gateway's connection dies: the broker publishes the will, NDEATH with bdSeq 0;
            # the forwarder reconnects with bdSeq 1 and new births, then new DDATA
            n = len(seen)
            paho = client._client._client  # aiomqtt.Client → paho client → its socket
            sock = paho.socket()
            assert isinstance(sock, socket.socket)
            sock.shutdown(socket.SHUT_RDWR)
            await until(lambda: any(m.type == "NDEATH" for m in seen[n:]), 30, "NDEATH (will)")
            death = next(m for m in seen[n:] if m.type == "NDEATH")
            assert death.metric(BD_SEQ).long_value == 0 and not death.payload.HasField("seq")
            await until(lambda: any(m.type == "NBIRTH" for m in seen[n:]), 30, "a new NBIRTH")
            reborn = next(m for m in seen[n:] if m.type == "NBIRTH")
            assert reborn.metric(BD_SEQ).long_value == 1 and reborn.payload.seq == 0
            more = shift(91, 92)
            journal.write(more)
            await until(lambda: sum(m.type == "DDATA" for m in seen[n:]) >= len(more), 20,
                        "DDATA after the reconnect")
            n = len(seen)
        # a graceful stop publishes NDEATH itself, with the bdSeq of the current birth
        await until(lambda: any(m.type == "NDEATH" for m in seen[n:]), 15, "NDEATH on stop")
        assert next(m for m in seen[n:] if m.type == "NDEATH").metric(BD_SEQ).long_value == 1
    assert journal.backlog("spb")["result"][0] == 0


FAST = {"batch_size": 20, "poll_interval_s": 0.05, "connect_timeout_s": 2, "send_timeout_s": 2,
        "backoff_initial_s": 0.05, "backoff_max_s": 0.5, "drain_timeout_s": 3}


def decoded(messages: list[tuple[str, bytes, bool]]) -> list[Msg]:
    out = []
    for topic, payload, _ in messages:
        parts = topic.split("/")
        out.append(Msg(topic, parts[2], parts[4] if len(parts) > 4 else None,
                       Payload.FromString(payload)))
    return out


def record_ids(msgs: list[Msg]) -> set[str]:
    return {m.string_value for msg in msgs if msg.type == "DDATA"
            for m in msg.payload.metrics if m.name.endswith("/record_id")}


async def test_broker_outage_delays_ddata_and_loses_none(tmp_path: Path,
                                                          journal: Journal) -> None:
    with MosquittoServer(tmp_path / "mqtt") as broker:
        fwd = make_sparkplug("spb", {"url": broker.url, **FAST}, ctx(site="outage"))
        async with (MqttLog(broker, "spBv1.0/#", client_id="spb-host") as sub,
                    forwarding(fwd, journal)):
            first = shift(1, 10)
            journal.write(first)
            want = {r.record_id for r in first}
            await until(lambda: want <= record_ids(decoded(sub.messages)), 20, "first part")
            broker.stop()  # the stations keep testing meanwhile
            second = shift(11, 30)
            journal.write(second)
            await until(lambda: fwd.failures > 0, 20, "the sink to notice")
            assert sum(n for n, _ in journal.backlog("spb").values()) > 0  # kept, not lost
            broker.start()
            want |= {r.record_id for r in second}
            await until(lambda: want <= record_ids(decoded(sub.messages)), 30, "the backlog")
    msgs = decoded(sub.messages)
    assert record_ids(msgs) == want  # every record, nothing else
    births = [i for i, m in enumerate(msgs) if m.type == "NBIRTH"]
    # bdSeq moves on with every CONNECT, refused attempts during the outage included
    bd = [msgs[i].metric(BD_SEQ).long_value for i in births]
    assert bd[0] == 0 and len(bd) >= 2 and bd == sorted(set(bd))
    for i in births:  # each session: its DBIRTHs before any DDATA
        assert [m.type for m in msgs[i + 1:i + 4]] == ["DBIRTH"] * 3
