"""The record model for stations that send little: absent values stay absent (never a zero),
records say which values the plant's config supplied and whose clock stamped them, and an
older journal migrates without losing a row or reusing a sequence number."""

from __future__ import annotations

import sqlite3
from dataclasses import replace
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from gateway.profiles import StationContext, load_profile, parse_profile
from gateway.profiles.decoders import serial_parser
from gateway.programs import STATION_DEFAULTS, ProgramParams, complete
from gateway.records import (
    CalibrationEvent,
    Rejected,
    TestResult,
    Verdict,
    record_from_dict,
)
from gateway.store import Journal, SqliteStore, open_journal
from gateway.store.schema import MIGRATIONS, SCHEMA_VERSION
from tests.gateway.store._data import T0, calibration, result

NOW = datetime(2026, 12, 3, 9, 0, tzinfo=UTC)


def test_a_gross_test_needs_no_reading() -> None:
    r = TestResult("L3-S1", "L3", 7, T0, T0, "3", Verdict.GROSS)
    assert r.leak_rate_sccm is None and r.pressure_loss_pa is None
    assert r.reject_limit_sccm is None and r.test_s is None
    d = r.to_dict()
    assert d["schema"] == 2 and d["leak_rate_sccm"] is None and d["supplied"] == {}
    assert record_from_dict(d) == r


def test_what_a_record_cannot_be_without() -> None:
    with pytest.raises(ValueError, match="verdict"):
        TestResult("L3-S1", "L3", 7, T0, T0, "3", "maybe")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="cycle"):
        TestResult("L3-S1", "L3", -1, T0, T0, "3", Verdict.PASS)
    with pytest.raises(ValueError, match="time_source"):
        TestResult("L3-S1", "L3", 1, T0, T0, "3", Verdict.PASS, time_source="sundial")


def test_supplied_values_are_named_and_checked() -> None:
    r = result(1, supplied=(("reject_limit_sccm", "config"), ("test_s", "profile")))
    assert r.origin("reject_limit_sccm") == "config"
    assert r.origin("test_s") == "profile"
    assert r.origin("leak_rate_sccm") == "station"
    assert record_from_dict(r.to_dict()) == r
    with pytest.raises(ValueError, match="unknown field"):
        result(1, supplied=(("cycle", "config"),))  # the station's own counter, always
    with pytest.raises(ValueError, match="origin"):
        result(1, supplied=(("test_s", "guess"),))
    with pytest.raises(ValueError, match="sorted"):
        result(1, supplied=(("test_s", "config"), ("fill_s", "config")))


def test_limits_checked_only_when_both_present() -> None:
    assert result(1, reject_limit_sccm=None, lower_limit_sccm=5.0).lower_limit_sccm == 5.0
    with pytest.raises(ValueError, match="lower limit"):
        result(1, reject_limit_sccm=2.0, lower_limit_sccm=5.0)


def test_a_version_1_payload_still_reads() -> None:
    v1 = result(3).to_dict()
    v1["schema"] = 1
    for key in ("part_family", "time_source", "supplied"):
        del v1[key]
    assert record_from_dict(v1) == result(3)


def test_calibration_optional_parts() -> None:
    c = CalibrationEvent("L3-S1", "L3", T0, T0, "3", 12.0, 60.0)
    assert c.ratio is None and c.sensitivity is None and c.passed is None
    assert c.standard_sccm is None
    assert record_from_dict(c.to_dict()) == c
    with pytest.raises(ValueError, match="above 0 sccm"):
        CalibrationEvent("L3-S1", "L3", T0, T0, "3", 12.0, 60.0, standard_sccm=0.0)


# -- the plant's program parameters ------------------------------------------------------------

PARAMS = {
    STATION_DEFAULTS: ProgramParams(fill_s=3.0, stabilise_s=8.0, test_s=10.0),
    "HX-210": ProgramParams(reject_limit_sccm=2.0, test_s=12.0, part_family="HX"),
}


def test_program_parameters_fill_only_what_is_absent() -> None:
    values = {"program": "HX-210", "test_s": 9.5, "leak_rate_sccm": 0.3}
    supplied: dict[str, str] = {}
    complete("result", values, PARAMS, supplied)
    assert values["test_s"] == 9.5  # the station's own value wins
    assert values["reject_limit_sccm"] == 2.0 and values["fill_s"] == 3.0
    assert values["part_family"] == "HX"
    assert supplied == {"reject_limit_sccm": "config", "fill_s": "config",
                        "stabilise_s": "config", "part_family": "config"}
    other = {"program": "MV-44"}
    complete("result", other, PARAMS, supplied := {})
    assert other == {"program": "MV-44", "fill_s": 3.0, "stabilise_s": 8.0, "test_s": 10.0}


SEMI = """
[profile]
name = "semi-test"
version = "1"
transport = "serial"

[serial]
mode = "stream"

[dialect]
kind = "delimited"

[result]
columns = ["cycle", "program", "verdict", "loss", "leak"]

[result.fields]
cycle = "cycle"
program = "program"
verdict = { from = "verdict", codes = { OK = "pass", NOK = "reject", GROSS = "gross" } }
pressure_loss_pa = { from = "loss", unit = "Pa" }
leak_rate_sccm = { from = "leak", unit = "sccm" }
"""


def _parse(line: str, ctx: StationContext) -> TestResult | Rejected:
    import tomllib

    profile = parse_profile(tomllib.loads(SEMI), "semi-test.toml")
    assert profile.serial is not None
    (item,) = serial_parser(profile.serial, ctx).parse([line], 1, NOW)
    assert isinstance(item, (TestResult, Rejected))
    return item


def test_a_station_without_clock_or_limits_through_a_profile() -> None:
    ctx = StationContext("L3-S9", "L3", program_params=PARAMS)
    r = _parse("41;HX-210;OK;12.5;0.31", ctx)
    assert isinstance(r, TestResult)
    assert r.ended_at == NOW and r.time_source == "gateway"
    assert r.reject_limit_sccm == 2.0 and r.origin("reject_limit_sccm") == "config"
    assert r.test_s == 12.0 and r.fill_s == 3.0
    assert r.origin("leak_rate_sccm") == "station"
    gross = _parse("42;HX-210;GROSS;;", ctx)
    assert isinstance(gross, TestResult) and gross.verdict is Verdict.GROSS
    assert gross.leak_rate_sccm is None and gross.pressure_loss_pa is None
    bare = _parse("43;HX-210;OK;12.5;0.31", StationContext("L3-S9", "L3"))
    assert isinstance(bare, TestResult) and bare.reject_limit_sccm is None and not bare.supplied


def test_builtin_profiles_keep_rejecting_empty_values_they_always_send() -> None:
    ctx = StationContext("L1-S1", "L1", "Europe/Berlin")
    parser = serial_parser(load_profile("lf-delim").serial, ctx)  # type: ignore[union-attr]
    line = ("R;1042;2026-12-02 07:15:09;HX-210;HX210-004711;ACC;;41.8;0.213;2.000;-1.000;"
            "3.0;8.0;10.0;22.41")
    (item,) = parser.parse([line], 1, NOW)
    assert isinstance(item, Rejected) and "test_pressure_pa" in item.reason


# -- the journal -------------------------------------------------------------------------------


def test_absent_values_round_trip_the_journal(tmp_path: Path) -> None:
    gross = result(2, verdict=Verdict.GROSS, leak_rate_sccm=None, pressure_loss_pa=None,
                   reject_limit_sccm=None, fill_s=None, stabilise_s=None, test_s=None,
                   test_pressure_pa=None, time_source="gateway", part_family="HX",
                   supplied=(("part_family", "config"),))  # fmt: skip
    cal = calibration(0, standard_sccm=None, standard_ref_pressure_pa=None, ratio=None,
                      sensitivity=None, passed=None)  # fmt: skip
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        j.write([result(1), gross, cal])
        got = [r for _, r in j.read_after("result", 0, 100)]
        cals = [c for _, c in j.read_after("calibration", 0, 100)]
    assert got == [result(1), gross]
    assert cals == [cal]


def test_summary_counts_only_readings(tmp_path: Path) -> None:
    rows = [result(1, leak_rate_sccm=0.2), result(2, leak_rate_sccm=0.4),
            result(3, verdict=Verdict.GROSS, leak_rate_sccm=None, pressure_loss_pa=None)]
    path = tmp_path / "s.db"
    with open_journal(f"sqlite:///{path}") as j:
        j.write(rows)
    end = T0 + timedelta(hours=2)
    with SqliteStore(path) as store:
        whole = store.leak_summary(T0 - timedelta(hours=1), end)  # summary hours
        counts = store.verdict_counts(T0 - timedelta(hours=1), end)
        hist = store.histogram(None, None, [0.0, 0.3, 1.0])
    assert int(whole["n"].iloc[0]) == 2
    assert whole["mean"].iloc[0] == pytest.approx(0.3)
    assert int(counts["n"].sum()) == 3  # every test counts as a test
    assert int(hist["n"].sum()) == 2  # a gross test without a rate is in no bin


def test_v4_journal_migrates_keeping_rows_and_sequence(tmp_path: Path) -> None:
    path = tmp_path / "v4.db"
    Journal(path, migrations=MIGRATIONS[:4]).close()
    conn = sqlite3.connect(path, isolation_level=None)
    v4_cols = ("station, line, cycle, ended_at, received_at, program, verdict, test_pressure_pa, "
               "pressure_loss_pa, leak_rate_sccm, reject_limit_sccm, fill_s, stabilise_s, test_s, "
               "part_id, reason, lower_limit_sccm, temperature_c, calibration_ref, raw, profile")
    conn.execute("BEGIN")
    for cycle in range(1, 6):
        conn.execute(
            f"INSERT INTO results (record_id, {v4_cols}) VALUES "
            f"(?, 'L1-S1', 'L1', ?, ?, ?, 'HX-210', 'pass', 3e5, 12.5, 0.4, 2.0, 3, 6, 4, NULL, "
            "'', NULL, NULL, NULL, 'raw', 'lf-delim@1')",
            (f"id{cycle}", cycle, cycle * 10**7, cycle * 10**7),
        )
    conn.execute("DELETE FROM results WHERE cycle >= 4")  # pruned: the high-water mark is 5
    conn.execute("COMMIT")
    conn.close()
    journal = open_journal(f"sqlite:///{path}")
    assert journal.version == SCHEMA_VERSION
    stored = [r for _, r in journal.read_after("result", 0, 100)]
    assert [r.cycle for r in stored] == [1, 2, 3]
    assert all(r.time_source == "station" and r.supplied == () for r in stored)
    journal.write([replace(stored[0], cycle=99)])
    seqs = [seq for seq, _ in journal.read_after("result", 0, 100)]
    journal.close()
    assert seqs[-1] == 6  # never a seq a sink may already have passed


def test_gap_event_round_trips_and_counts() -> None:
    from gateway.records import GapEvent

    gap = GapEvent(station="S1", at=datetime(2026, 12, 3, 8, tzinfo=UTC), first=65534, last=1,
                   source="ring", detail="overwritten")
    again = GapEvent.from_dict(gap.to_dict())
    assert again == gap
    assert gap.count is None  # across a wrap the reader knows the modulus, the record does not
    assert GapEvent(station="S1", at=gap.at, first=5, last=7, source="sequence").count == 3
    with pytest.raises(ValueError, match="first must be a cycle number"):
        GapEvent(station="S1", at=gap.at, first=-1, last=2, source="ring")
