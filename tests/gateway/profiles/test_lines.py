"""Line dialects and normalisation of the serial built-in profiles (sim/README.md formats)."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime

import pint
import pytest

from gateway.profiles import StationContext, load_profile
from gateway.profiles.decoders import serial_parser
from gateway.records import CalibrationEvent, Rejected, TestResult, Verdict
from tests.gateway.profiles.conftest import RECEIVED

UREG = pint.UnitRegistry()

DELIM_R = ("R;1042;2026-12-02 07:15:09;HX-210;HX210-004711;ACC;350.02;41.8;0.213;2.000;-1.000;"
           "3.0;8.0;10.0;22.41")
DELIM_C = "C;2026-12-02 06:00:41;HX-210;38.6;237.9;3.000;350.0;6.163;OK"
KV_RES = """TYPE=RES
CYC=311
TS=2026-12-02T06:15:09Z
PRG=MV-44
SN=MV44-000123
VRD=GOOD
PU=psi
LU=sccm
P=20.003
DP=0.01040
LR=0.512
LIM=3.500
LLIM=
TF=2.5
TST=6.0
TT=8.0
TMP=21.7""".splitlines()
KV_CAL = """TYPE=CAL
TS=2026-12-02T06:00:41Z
PRG=MV-44
PU=psi
LU=sccm
ML=0.00812
SL=0.03771
STD=2.000
STDP=20.000
OK=1""".splitlines()


def _one(items: Sequence[object]) -> object:
    assert len(items) == 1
    return items[0]


def test_delimited_result(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    r = _one(parser.parse([DELIM_R], 7, RECEIVED))
    assert isinstance(r, TestResult)
    # Europe/Berlin is UTC+1 in December: 07:15:09 local = 06:15:09Z.
    assert r.ended_at == datetime(2026, 12, 2, 6, 15, 9, tzinfo=UTC)
    assert (r.cycle, r.program, r.part_id, r.verdict) == (1042, "HX-210", "HX210-004711",
                                                          Verdict.PASS)
    assert r.test_pressure_pa == pytest.approx(UREG.Quantity(350.02, "kPa").to("Pa").magnitude)
    assert (r.pressure_loss_pa, r.leak_rate_sccm, r.reject_limit_sccm) == (41.8, 0.213, 2.0)
    assert (r.lower_limit_sccm, r.fill_s, r.stabilise_s, r.test_s) == (-1.0, 3.0, 8.0, 10.0)
    assert r.temperature_c == 22.41
    assert r.raw == DELIM_R and r.profile == "lf-delim@1.0"
    assert (r.station, r.line) == ("L1-S1", "L1")


def test_delimited_calibration_derives_sensitivity(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    c = _one(parser.parse([DELIM_C], 1, RECEIVED))
    assert isinstance(c, CalibrationEvent)
    assert c.ratio == 6.163  # sent by the station, kept as sent
    # sensitivity = standard / (standard_loss - master_loss): two-point calibration (common
    # practice; docs/sources.md)
    assert c.sensitivity == pytest.approx(3.0 / (237.9 - 38.6))
    assert c.passed is True and c.standard_ref_pressure_pa == pytest.approx(350_000)


def test_failing_calibration_without_span_is_kept_and_explained(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    c = _one(parser.parse(["C;2026-12-02 06:00:41;HX-210;41.2;39.8;3.000;350.0;0.966;OK"], 1,
                          RECEIVED))
    assert isinstance(c, CalibrationEvent)
    assert c.passed is False and c.sensitivity is None  # no span: no value, not 0
    assert "no span" in c.reason and "station reported passed" in c.reason


def test_keyvalue_units_from_fields(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-kv").serial, ctx)  # type: ignore[union-attr]
    r = _one(parser.parse(KV_RES, 3, RECEIVED))
    assert isinstance(r, TestResult)
    assert r.ended_at == datetime(2026, 12, 2, 6, 15, 9, tzinfo=UTC)  # Z wins over the zone
    assert r.test_pressure_pa == pytest.approx(UREG.Quantity(20.003, "psi").to("Pa").magnitude)
    assert r.pressure_loss_pa == pytest.approx(UREG.Quantity(0.0104, "psi").to("Pa").magnitude)
    assert r.lower_limit_sccm is None and r.temperature_c == 21.7
    assert r.raw == "\n".join(KV_RES)
    c = _one(parser.parse(KV_CAL, 30, RECEIVED))
    assert isinstance(c, CalibrationEvent)
    # The answer has no ratio: SL / ML (sim/README.md).
    assert c.ratio == pytest.approx(0.03771 / 0.00812)
    span_pa = UREG.Quantity(0.03771 - 0.00812, "psi").to("Pa").magnitude
    assert c.sensitivity == pytest.approx(2.0 / span_pa)


def test_keyvalue_empty_answer_and_unknown(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-kv").serial, ctx)  # type: ignore[union-attr]
    assert parser.parse(["NONE"], 1, RECEIVED) == []
    rej = _one(parser.parse(["ERR=UNKNOWN"], 4, RECEIVED))
    assert isinstance(rej, Rejected) and rej.line_no == 4
    assert "matches no line kind" in rej.reason and "TYPE = RES" in rej.reason
    rej = _one(parser.parse([*KV_RES[:5], "garbage", *KV_RES[5:]], 10, RECEIVED))
    assert isinstance(rej, Rejected) and "line 15" in rej.reason and "key=value" in rej.reason


def test_keyvalue_noise_with_the_separator_is_not_taken_for_data(ctx: StationContext) -> None:
    """lf-kv rejects an answer carrying a key no field maps (unknown_keys = "reject"): line
    noise that happens to contain "=" would otherwise ride along inside a stored record."""
    parser = serial_parser(load_profile("lf-kv").serial, ctx)  # type: ignore[union-attr]
    noisy = ["'}_hp\\xc9'=4\\xf6-", *KV_RES]
    rej = _one(parser.parse(noisy, 20, RECEIVED))
    assert isinstance(rej, Rejected) and "no field maps" in rej.reason, rej
    assert rej.raw == "\n".join(noisy)  # the whole answer is kept for the audit
    assert isinstance(_one(parser.parse(KV_RES, 40, RECEIVED)), TestResult)
    assert isinstance(_one(parser.parse(KV_CAL, 60, RECEIVED)), CalibrationEvent)


def test_keyvalue_pairs_on_one_line() -> None:
    import tomllib

    from gateway.profiles import parse_profile

    text = """
[profile]
name = "kv-line"
version = "1"
transport = "serial"
[serial]
mode = "stream"
[dialect]
kind = "keyvalue"
pair_separator = ","
[calibration]
[calibration.fields]
ended_at = { from = "t", format = "unix" }
program = "p"
master_loss_pa = { from = "m", unit = "mbar" }
standard_loss_pa = { from = "s", unit = "mbar" }
standard_sccm = { from = "q", unit = "sccm" }
standard_ref_pressure_pa = { from = "r", unit = "bar" }
passed = { from = "ok", codes = { y = true, n = false } }
"""
    profile = parse_profile(tomllib.loads(text), "kv-line.toml")
    ctx = StationContext("X", "L2")
    c = _one(serial_parser(profile.serial, ctx).parse(  # type: ignore[union-attr]
        ["t=1764656441,p=MV-44,m=0.5,s=2.5,q=2,r=1.38,ok=y"], 1, RECEIVED))
    assert isinstance(c, CalibrationEvent)
    assert c.ended_at == datetime.fromtimestamp(1764656441, UTC)
    assert (c.master_loss_pa, c.standard_loss_pa) == pytest.approx((50.0, 250.0))
    assert c.sensitivity == pytest.approx(2 / 200)


def test_fixed_width_and_regex(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-print").serial, ctx)  # type: ignore[union-attr]
    row = ("R 0001042 02.12.26 07:15:09 HX-210   HX210-004711   P  350.02   41.8  0.213  2.000"
           "  3.0  8.0 10.0")
    r = _one(parser.parse([row], 1, RECEIVED))
    assert isinstance(r, TestResult)
    assert (r.cycle, r.part_id, r.verdict, r.leak_rate_sccm) == (1042, "HX210-004711",
                                                                 Verdict.PASS, 0.213)
    assert r.ended_at == datetime(2026, 12, 2, 6, 15, 9, tzinfo=UTC)
    cal = ("CAL 02.12.26 06:00:41 PRG HX-210 ZERO 38.6 Pa SPAN 237.9 Pa STD 3.000 sccm @ 350.0 "
           "kPa PASS")
    c = _one(parser.parse([cal], 2, RECEIVED))
    assert isinstance(c, CalibrationEvent) and c.ratio == pytest.approx(237.9 / 38.6)
    rej = _one(parser.parse([row + " extra"], 3, RECEIVED))
    assert isinstance(rej, Rejected) and "expected at most 97" in rej.reason


@pytest.mark.parametrize(
    ("line", "reason"),
    [
        (DELIM_R.replace("ACC", "OK?"), "verdict: unknown code 'OK?'; expected one of ACC, REJ"),
        (DELIM_R.replace("41.8", "4l.8"), "pressure_loss_pa (from 'loss'): '4l.8' is not a number"),
        (DELIM_R.replace(";1042;", ";-5;"), "cycle: -5 is negative"),
        (DELIM_R.replace(";1042;", ";x;"), "cycle: 'x' is not an integer"),
        (DELIM_R.replace("350.02", ""), "test_pressure_pa (from 'pressure'): empty"),
        (DELIM_R.replace("350.02", "nan"), "'nan' is not a number"),
        (DELIM_R.replace("350.02", "1e999"), "is not a finite number"),
        (DELIM_R.replace("-1.000", "5.000"), "lower limit (5 sccm) must be below"),
        (DELIM_R + ";", "result line has 16 fields"),
        ("", "empty line"),
        ("R;1\x00;x", "control character 0x00"),
        ("X;1;2", "matches no line kind"),
    ],
)
def test_bad_lines_rejected_with_reason(ctx: StationContext, line: str, reason: str) -> None:
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    rej = _one(parser.parse([line], 12, RECEIVED))
    assert isinstance(rej, Rejected)
    assert reason in rej.reason
    assert (rej.line_no, rej.station, rej.profile, rej.raw) == (12, "L1-S1", "lf-delim@1.0", line)


def test_bytes_wrong_encoding_and_too_long(ctx: StationContext) -> None:
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    rej = _one(parser.parse(["R;1042;é".encode()], 1, RECEIVED))
    assert isinstance(rej, Rejected) and "not valid ascii: byte 0xc3 at position 7" in rej.reason
    assert rej.raw == "52 3b 31 30 34 32 3b c3 a9"
    rej = _one(parser.parse(["R" * 40_000], 1, RECEIVED))
    assert isinstance(rej, Rejected) and "max_line is 32768" in rej.reason
    assert len(rej.raw) < 4200
    good = _one(parser.parse([DELIM_R.encode("ascii")], 1, RECEIVED))
    assert isinstance(good, TestResult) and good.raw == DELIM_R


def test_station_timezone_and_dst(ctx: StationContext) -> None:
    summer = DELIM_R.replace("2026-12-02", "2026-07-02")
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    r = _one(parser.parse([summer], 1, RECEIVED))
    assert isinstance(r, TestResult)
    assert r.ended_at == datetime(2026, 7, 2, 5, 15, 9, tzinfo=UTC)  # CEST = UTC+2
    bad = StationContext("S", "L", "Mars/Olympus")
    rej = _one(serial_parser(load_profile("lf-delim").serial, bad).parse(  # type: ignore[union-attr]
        [DELIM_R], 1, RECEIVED))
    assert isinstance(rej, Rejected) and "unknown time zone 'Mars/Olympus'" in rej.reason
