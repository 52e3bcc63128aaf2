"""Pressure curves on a serial line: lf-delim's one-line form, a block form, ties, refusals."""

from __future__ import annotations

import dataclasses
import tomllib
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pint
import pytest

from gateway.errors import ConfigError
from gateway.profiles import StationContext, load_profile
from gateway.profiles.decoders import serial_parser
from gateway.profiles.loader import parse_profile
from gateway.records import CalibrationEvent, PressureTrace, Rejected, TestResult
from tests.gateway.profiles.conftest import RECEIVED
from tests.gateway.profiles.test_lines import DELIM_C, DELIM_R

UREG = pint.UnitRegistry()
CTX = StationContext(station="L1-S1", line="L1", timezone="Europe/Berlin", traces=True)
SAMPLES = ["0.0000", "175.5000", "350.1000", "350.0500", "349.9800", "349.9000", "0.2000"]
T_LINE = "T;1042;R;500;2;3;6;" + ";".join(SAMPLES)


def _parser(ctx: StationContext = CTX):  # type: ignore[no-untyped-def]
    spec = load_profile("lf-delim").serial
    assert spec is not None
    return serial_parser(spec, ctx)


def _feed(parser, lines: list[str]) -> list[object]:  # type: ignore[no-untyped-def]
    out: list[object] = []
    for i, line in enumerate(lines):
        out += parser.parse([line], i + 1, RECEIVED)
    return out


def test_a_curve_after_its_result_takes_the_results_time_and_program() -> None:
    result, trace = _feed(_parser(), [DELIM_R, T_LINE])
    assert isinstance(result, TestResult) and isinstance(trace, PressureTrace)
    assert (trace.station, trace.line, trace.cycle, trace.role) == ("L1-S1", "L1", 1042, "result")
    assert trace.ended_at == result.ended_at and trace.program == result.program == "HX-210"
    assert trace.time_source == "station" and trace.profile == "lf-delim@1.0"
    # kPa → Pa checked with pint (an outside unit library)
    want = [UREG.Quantity(float(s), "kPa").to("Pa").magnitude for s in SAMPLES]
    assert trace.pressures_pa == pytest.approx(want, rel=1e-12)
    assert trace.sample_interval_s == 0.5
    # sample indexes 2, 3, 6 at 0.5 s: stabilise 1 s, test 1.5 s, dump 3 s; the curve ends at 3 s
    assert trace.phases == (("fill", 0.0), ("stabilise", 1.0), ("test", 1.5), ("dump", 3.0),
                            ("end", 3.0))
    # the result ended at the end of test = the dump start: the first sample is 3 s before
    assert trace.started_at == result.ended_at - timedelta(seconds=3.0)


def test_a_calibrations_curves_follow_it_and_take_its_time() -> None:
    lines = [DELIM_C, T_LINE.replace(";R;", ";M;"), T_LINE.replace(";R;", ";S;")]
    cal, master, standard = _feed(_parser(), lines)
    assert isinstance(cal, CalibrationEvent)
    assert isinstance(master, PressureTrace) and isinstance(standard, PressureTrace)
    assert (master.role, standard.role) == ("master", "standard")
    assert master.ended_at == standard.ended_at == cal.ended_at
    assert master.record_id != standard.record_id


def test_a_curve_whose_record_was_not_seen_is_kept_on_the_gateways_clock() -> None:
    # the gateway started listening between the result and its curve, or the cycle differs
    (alone,) = _feed(_parser(), [T_LINE])
    assert isinstance(alone, PressureTrace)
    assert alone.time_source == "gateway" and alone.ended_at == RECEIVED
    other = DELIM_R.replace("R;1042;", "R;1041;")
    _, untied = _feed(_parser(), [other, T_LINE])
    assert isinstance(untied, PressureTrace) and untied.time_source == "gateway"


def test_curves_of_a_station_the_plant_does_not_collect_are_dropped_not_quarantined() -> None:
    parser = _parser(dataclasses.replace(CTX, traces=False))
    out = _feed(parser, [DELIM_R, T_LINE, T_LINE])
    assert [type(o) for o in out] == [TestResult]
    assert parser._traces.dropped == 2


@pytest.mark.parametrize(
    ("line", "reason"),
    [
        ("T;1042;R;500;2;3;6;350.0;abc;349.9", "trace sample 'abc' is not a number"),
        ("T;1042;X;500;2;3;6;350.0;349.9", "trace role: 'X' is not one of the profile's codes"),
        ("T;1042;R;0;2;3;6;350.0;349.9", "trace interval must be above 0 s"),
        ("T;1042;R;500;0;1;60;350.0;349.9;349.8", "trace dump starts at 30 s, outside"),
        ("T;1042;R;500;3;2;4;1;2;3;4;5", "not in time order"),
        ("T;-4;R;500;2;3;6;350.0;349.9", "is not a cycle number"),
        ("T;1042;R;500;0;0;0;350.0", "at least 2 samples"),
        ("T;1042;R", "its header alone has 7"),
    ],
)
def test_a_broken_curve_goes_to_quarantine_with_its_reason(line: str, reason: str) -> None:
    out = _feed(_parser(), [line])
    assert len(out) == 1 and isinstance(out[0], Rejected), out
    assert reason in out[0].reason and out[0].raw == line


def test_more_samples_than_the_profile_allows_is_not_a_curve() -> None:
    line = "T;1042;R;100;2;3;6;" + ";".join(["350.0"] * 3001)
    (rej,) = _feed(_parser(), [line])
    assert isinstance(rej, Rejected) and "samples.max is 3000" in rej.reason


BLOCK_PROFILE = """
[profile]
name = "blocky"
version = "1"
transport = "serial"

[serial]
mode = "stream"
terminator = "\\r\\n"

[dialect]
kind = "delimited"
separator = ","

[result]
when = { field = "tag", equals = "RES" }
columns = ["tag", "cycle", "verdict", "leak"]

[result.fields]
cycle = { from = "cycle" }
verdict = { from = "verdict", codes = { P = "pass", F = "reject" } }
leak_rate_sccm = { from = "leak", unit = "sccm" }

[trace]
layout = "block"
when = { field = "tag", equals = "CURVE" }
end = { field = "tag", equals = "ENDCURVE" }
columns = ["tag", "cycle", "test_at"]
cycle = "cycle"
interval_s = 0.25
phases = { test = "test_at" }
phase_unit = "s"
samples = { unit = "bar", max = 5 }
sample_column = 1
"""


def _block_parser():  # type: ignore[no-untyped-def]
    profile = parse_profile(tomllib.loads(BLOCK_PROFILE), "blocky.toml")
    assert profile.serial is not None
    return serial_parser(profile.serial, CTX)


def test_a_block_of_sample_lines_between_its_header_and_end_line() -> None:
    lines = ["RES,7,P,0.2", "CURVE,7,0.5", "S,3.5", "S,3.49", "S,3.48", "ENDCURVE", "RES,8,F,9"]
    result, trace, nxt = _feed(_block_parser(), lines)
    assert isinstance(result, TestResult) and isinstance(nxt, TestResult)
    assert isinstance(trace, PressureTrace) and trace.cycle == 7
    want = [UREG.Quantity(v, "bar").to("Pa").magnitude for v in (3.5, 3.49, 3.48)]
    assert trace.pressures_pa == pytest.approx(want, rel=1e-12)
    assert trace.phases == (("fill", 0.0), ("test", 0.5), ("end", 0.5))
    # no clock in this profile: the result takes the gateway's time and the curve the result's
    assert trace.ended_at == result.ended_at


def test_a_block_cut_short_by_the_next_record_is_quarantined_and_the_record_kept() -> None:
    lines = ["CURVE,7,0.5", "S,3.5", "S,3.49", "RES,8,F,9"]
    cut, nxt = _feed(_block_parser(), lines)
    assert isinstance(cut, Rejected) and "trace block not closed: 2 samples" in cut.reason
    assert cut.raw.splitlines()[0] == "CURVE,7,0.5"
    assert isinstance(nxt, TestResult) and nxt.cycle == 8


def test_a_block_longer_than_its_maximum_is_quarantined_not_swallowing_the_line() -> None:
    lines = ["CURVE,7,0.5", *["S,3.5"] * 6, "RES,8,F,9"]
    out = _feed(_block_parser(), lines)
    assert isinstance(out[0], Rejected) and "longer than samples.max = 5" in out[0].reason
    assert isinstance(out[-1], TestResult)


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        ('cycle = "cycle"', 'cycle = "cyc"', "trace.cycle: expected one of trace.columns"),
        ('samples = { unit = "bar", max = 5 }', 'samples = { unit = "sccm" }',
         "trace.samples.unit: expected a pressure unit"),
        ('phases = { test = "test_at" }', 'phases = { soak = "test_at" }',
         "trace.phases.soak: expected a phase the station starts"),
        ('end = { field = "tag", equals = "ENDCURVE" }\n', "",
         "trace.end: expected the line closing a block"),
        ("interval_s = 0.25\n", "", "trace.interval: expected where the sample interval"),
        ('phase_unit = "s"', 'phase_unit = "minutes"', "trace.phase_unit"),
    ],
)
def test_profile_mistakes_in_trace_are_one_line_errors(old: str, new: str, message: str) -> None:
    text = BLOCK_PROFILE.replace(old, new)
    assert text != BLOCK_PROFILE
    with pytest.raises(ConfigError) as err:
        parse_profile(tomllib.loads(text), "blocky.toml")
    assert message in str(err.value) and "\n" not in str(err.value)


def test_the_config_refuses_traces_for_a_profile_that_cannot_send_them(tmp_path: Path) -> None:
    from gateway.config import load_config

    cfg = tmp_path / "g.toml"
    cfg.write_text(f'site = "S"\nstore = "sqlite:///{tmp_path}/j.db"\n[[stations]]\nid = "A"\n'
                   'line = "L"\nprofile = "lf-kv"\nendpoint = "/dev/ttyUSB0"\ntraces = true\n')
    with pytest.raises(ConfigError, match=r"stations\[A\]\.traces: expected false: profile "
                                          r"lf-kv@1\.\d+ does not describe"):
        load_config(cfg)
    cfg.write_text(cfg.read_text().replace("lf-kv", "lf-delim").replace(
        "/dev/ttyUSB0", "tcp://127.0.0.1:1"))
    (station,) = load_config(cfg).stations
    assert station.traces is True


def test_every_time_in_a_trace_is_utc() -> None:
    _, trace = _feed(_parser(), [DELIM_R, T_LINE])
    assert isinstance(trace, PressureTrace)
    assert trace.ended_at.tzinfo == UTC and trace.received_at == RECEIVED
    assert trace.ended_at == datetime(2026, 12, 2, 6, 15, 9, tzinfo=UTC)  # 07:15:09 CET
