"""Line protocol encoding against the InfluxDB line protocol reference, "Special characters":
https://docs.influxdata.com/influxdb/v1.6/write_protocols/line_protocol_reference/
and against influxdb-client's own encoder (``Point.to_line_protocol``) as a reference library.
The round trip through a real InfluxDB is in tests/integration/test_sinks_influx_store.py."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest
from hypothesis import given
from hypothesis import strategies as st
from influxdb_client import Point

from gateway.influxdb.lineprotocol import (
    encode,
    encode_line,
    escape_measurement,
    escape_tag,
    field_string,
    record_line,
    timestamp_ns,
)
from gateway.records import StationState, StationStatus
from tests.integration.sinks_data import calibration, result

# --- the reference's rules, one by one ---------------------------------------------------


def test_measurement_escapes_comma_and_space_only() -> None:
    # reference: "Measurements: escape commas and spaces"; an equals sign needs no escape there
    assert escape_measurement("leak results,v2") == r"leak\ results\,v2"
    assert escape_measurement("a=b") == "a=b"


def test_tag_keys_values_and_field_keys_escape_comma_equals_space() -> None:
    # reference: "Tag keys, tag values, and field keys: escape commas, equal signs, and spaces"
    assert escape_tag("L1 S1,a=b") == r"L1\ S1\,a\=b"


def test_string_field_escapes_double_quote_and_backslash() -> None:
    # reference: "String field values: escape double quotes and backslash characters"
    assert field_string('say "hi" C:\\x') == r'"say \"hi\" C:\\x"'


def test_no_newlines_in_values() -> None:
    # reference: "Line protocol does not support the newline character \n in tag values or
    # field values"; a point must stay one line
    line = encode_line("m", {"t": "a\nb"}, {"s": "x\r\ny"}, 1)
    assert "\n" not in line and "\r" not in line
    assert line == r'm,t=a\ b s="x\r\ny" 1'


def test_integers_floats_booleans() -> None:
    # reference "Data types": integers carry a trailing i, floats do not, booleans true/false
    line = encode_line("m", {}, {"i": 3, "f": 2.0, "e": 1e-05, "b": True, "n": None}, 7)
    assert line == "m i=3i,f=2.0,e=1e-05,b=true 7"


def test_empty_tag_value_is_omitted_and_trailing_backslash_dropped() -> None:
    # reference: tag values cannot be empty ("omit the tag"); a trailing backslash would
    # escape the separator (common practice in encoders, e.g. telegraf)
    assert encode_line("m", {"a": "", "b": None, "c": "x\\"}, {"v": 1.0}, 1) == "m,c=x v=1.0 1"


def test_a_point_needs_a_field() -> None:
    # reference: "Points must have at least one field"
    with pytest.raises(ValueError, match="at least one field"):
        encode_line("m", {"a": "b"}, {"v": None}, 1)


def test_tags_sorted_by_key() -> None:
    # reference performance tip: sort tags by key
    assert encode_line("m", {"z": "1", "a": "2"}, {"v": 1.0}, 1) == "m,a=2,z=1 v=1.0 1"


_text = st.text(
    alphabet=st.characters(codec="utf-8", exclude_characters="\n\r\t\\"),
    min_size=1, max_size=20,
)


@given(measurement=_text, key=_text, value=_text, s=st.text(
    alphabet=st.characters(codec="utf-8", exclude_characters="\n\r"),
    max_size=30))
def test_same_bytes_as_influxdb_client(measurement: str, key: str, value: str, s: str) -> None:
    """influxdb-client's Point is an independent encoder of the same reference."""
    ours = encode_line(measurement, {key: value}, {"s": s}, 123)
    ref = Point(measurement).tag(key, value).field("s", s).time(123).to_line_protocol()
    assert ours == ref


# --- our schema ------------------------------------------------------------------------------


def test_timestamp_is_exact_ns() -> None:
    t = datetime(2026, 3, 2, 6, 0, 1, 123456, tzinfo=UTC)
    assert timestamp_ns(t) == 1772431201123456000
    far = datetime(2250, 1, 1, tzinfo=UTC) + timedelta(microseconds=1)
    assert timestamp_ns(far) % 1000 == 0 and timestamp_ns(far) // 1000 % 10**6 == 1


def _tags(line: str) -> dict[str, str]:
    """The tag set of a point whose names contain no escaped characters."""
    key = line.split(" ", 1)[0]
    return dict(kv.split("=", 1) for kv in key.split(",")[1:])


def test_result_point_tags_and_fields() -> None:
    r = result("L1-S1", 3)
    line = record_line(r, site="nw", seq=42)
    assert line.startswith("leak_results,")
    assert _tags(line) == {"site": "nw", "line": "L1", "station": "L1-S1", "program": "HX-210",
                           "verdict": r.verdict.value}
    assert int(line.rsplit(" ", 1)[1]) == timestamp_ns(r.ended_at)
    fields = line.split(" ", 1)[1].rsplit(" ", 1)[0]
    # the part serial number is a field (high cardinality), never a tag
    assert f'part_id="{r.part_id}"' in fields and "cycle=3i" in fields and "seq=42i" in fields
    assert f'record_id="{r.record_id}"' in fields
    assert f"received_at_ns={timestamp_ns(r.received_at)}i" in fields
    spaced = record_line(r, site="Northmere Works")
    assert spaced.startswith("leak_results,line=L1,program=HX-210,site=Northmere\\ Works,")


def test_calibration_tags() -> None:
    line = record_line(calibration("L1-S1", 1), site="nw")
    assert line.startswith("leak_calibrations,")
    assert set(_tags(line)) == {"site", "line", "station", "program"}
    assert "passed=true" in line


def test_float_fields_stay_float_when_given_ints() -> None:
    r = result("L1-S1", 3, test_pressure_pa=300000)
    assert "test_pressure_pa=300000.0" in record_line(r, site="nw")


def test_optional_fields_are_omitted() -> None:
    r = result("L1-S1", 5)  # cycle 5: no part id; odd: temperature given
    line = record_line(r, site="nw")
    assert "part_id=" not in line and "lower_limit_sccm" not in line and "temperature_c=" in line


def test_status_gets_its_line_from_the_config() -> None:
    s = StationStatus(station="L2-S1", at=datetime(2026, 3, 2, tzinfo=UTC),
                      state=StationState.FAULT, detail='no "answer"')
    body = encode([(9, s)], site="nw", lines={"L2-S1": "L2"})
    assert body.startswith("station_status,line=L2,site=nw,station=L2-S1 state=\"fault\"")
    assert r'detail="no \"answer\""' in body


def test_resend_is_the_same_point() -> None:
    r = result("L1-S2", 8)
    first, again = record_line(r, site="nw", seq=1), record_line(r, site="nw", seq=1)
    assert first == again  # same measurement, tags and timestamp: InfluxDB overwrites
