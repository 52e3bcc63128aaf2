"""Sparkplug B payloads and options: the wire format checked by protoc, mistakes one line."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from gateway.sinks.sparkplug import metrics as spm
from gateway.sinks.sparkplug.node import SparkplugClient, make_sparkplug
from tests.integration.sinks_data import calibration, ctx, result, status


def decode_raw(data: bytes, tmp_path: Path) -> str:
    """protoc's own schema-less decoder (grpcio-tools): field numbers as they are on the wire."""
    blob = tmp_path / "payload.bin"
    blob.write_bytes(data)
    with blob.open("rb") as stdin:
        done = subprocess.run([sys.executable, "-m", "grpc_tools.protoc", "--decode_raw"],
                              stdin=stdin, capture_output=True, check=True, timeout=60)
    return done.stdout.decode()


def test_wire_field_numbers_follow_the_specification(tmp_path: Path) -> None:
    # Sparkplug B 3.0, Payload: timestamp = 1, metrics = 2, seq = 3; Metric: name = 1,
    # timestamp = 3, datatype = 4, is_null = 7, properties = 9, long_value = 11,
    # double_value = 13, boolean_value = 14, string_value = 15; DataType Int64 = 4,
    # Double = 10, Boolean = 11, String = 12 (field and type numbers from memory of the
    # specification's protobuf definition)
    nbirth = decode_raw(spm.encode(spm.node_birth(7, 1_700_000_000_000)), tmp_path)
    assert "1: 1700000000000" in nbirth and "3: 0" in nbirth
    assert '1: "bdSeq"' in nbirth and "4: 4" in nbirth and "11: 7" in nbirth
    assert '1: "Node Control/Rebirth"' in nbirth and "4: 11" in nbirth and "14: 0" in nbirth
    ddata = decode_raw(spm.encode(spm.record_metrics(42, 5, result("L1-S1", 3))), tmp_path)
    assert "3: 42" in ddata and '1: "Result/leak_rate"' in ddata and "4: 10" in ddata
    assert '15: "HX-210"' in ddata and "13: 0x" in ddata  # doubles print as hex bit patterns
    dbirth = decode_raw(spm.encode(spm.birth_metrics(1, 5, station="L1-S1", line="L1")),
                        tmp_path)
    assert '1: "engUnit"' in dbirth and '8: "sccm"' in dbirth and "7: 1" in dbirth


def test_ndeath_has_no_seq_and_records_map_to_their_metrics() -> None:
    death = spm.node_death(3, 9)
    assert not death.HasField("seq") and death.metrics[0].long_value == 3
    names = {m.name for m in spm.record_metrics(1, 0, calibration("L2-S1", 1)).metrics}
    assert names and all(n.startswith("Calibration/") for n in names)
    state = spm.record_metrics(1, 0, status("L1-S2", 10, "idle"))
    assert [m.string_value for m in state.metrics][:2] == ["idle", "step 10"]
    missing = spm.record_metrics(1, 0, result("L1-S1", 4))  # cycle 4: no temperature
    assert next(m for m in missing.metrics if m.name == "Result/temperature").is_null


def test_rebirth_command_and_garbage() -> None:
    cmd = spm.node_birth(0, 0)
    cmd.metrics[1].boolean_value = True
    assert spm.wants_rebirth(spm.encode(cmd))
    assert not spm.wants_rebirth(spm.encode(spm.node_birth(0, 0)))
    with pytest.raises(ValueError, match="not a Sparkplug B payload"):
        spm.wants_rebirth(b"\xff\xff\xff")


def test_options_and_topics() -> None:
    fwd = make_sparkplug("spb", {"url": "mqtt://h"}, ctx(site="Northmere Works"))
    client = fwd.client
    assert isinstance(client, SparkplugClient)
    assert client.nbirth_topic == "spBv1.0/northmere-works/NBIRTH/gw-test"
    assert client.device_topic("DDATA", "L1-S1") == "spBv1.0/northmere-works/DDATA/gw-test/l1-s1"
    assert client.opts.client_id == "leakfleet-gw-test-spb"
    assert client.kinds == ("result", "calibration", "status")
    own = make_sparkplug("spb", {"url": "mqtt://h", "group_id": "Plant A",
                                 "edge_node_id": "edge-1"}, ctx()).client
    assert isinstance(own, SparkplugClient) and own.ncmd_topic == "spBv1.0/Plant A/NCMD/edge-1"
    for bad, match in (({"group_id": "a/b"}, "group_id"), ({"edge_node_id": "#"}, "edge_node"),
                       ({"topic_prefix": "x"}, "Sparkplug topics are fixed"),
                       ({"colour": 1}, "unknown key"), ({"kinds": ["trace"]}, "DDATA")):
        with pytest.raises(ValueError, match=match):
            make_sparkplug("spb", {"url": "mqtt://h", **bad}, ctx())
    with pytest.raises(ValueError, match="both map to topic level"):
        make_sparkplug("spb", {"url": "mqtt://h"}, ctx(stations={"A 1": "L", "a-1": "L"}))
