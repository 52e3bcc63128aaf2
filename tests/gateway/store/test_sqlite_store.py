"""SqliteStore queries against hand-computed expectations on a small hand-built plant."""

from __future__ import annotations

import importlib.util
import json
import math
import sqlite3
from dataclasses import fields
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from gateway.errors import ConfigError, StoreError
from gateway.records import TestResult, Verdict
from gateway.store import Journal, SqliteStore, open_journal, open_store, register_store
from gateway.store.base import QueryStore
from tests.gateway.store._data import T0, calibration, result, status

pytestmark = pytest.mark.timeout(60)
DAY = timedelta(days=1)


def res(station: str, cycle: int, minutes: float, verdict: str, leak: float, part: str | None,
        program: str) -> TestResult:  # fmt: skip
    line = station.split("-")[0]
    return result(
        cycle, station=station, line=line, ended_at=T0 + timedelta(minutes=minutes),
        verdict=verdict, leak_rate_sccm=leak, part_id=part, program=program,
    )  # fmt: skip


# L1-S1 and L1-S2 on line L1, L2-S1 on line L2 (never calibrated), L2-S9 only ever reported a
# status. Part B fails at L1-S1 and passes its retest at L1-S2; part C fails twice.
PLANT = [
    res("L1-S1", 1, 0.5, "pass", 0.4, "A", "HX-210"),
    res("L1-S1", 2, 1.0, "reject", 2.5, "B", "HX-210"),
    res("L1-S1", 3, 70.0, "pass", 0.6, None, "HX-210"),
    res("L1-S2", 1, 5.0, "gross", 9.0, "C", "HX-230"),
    res("L1-S2", 2, 10.0, "pass", 1.0, "B", "HX-230"),
    res("L1-S2", 3, 20.0, "reject", 2.2, "C", "HX-230"),
    res("L1-S2", 4, 24 * 60.0, "pass", 0.3, "D", "HX-230"),
    res("L2-S1", 1, 30.0, "aborted", 0.0, None, "MV-44"),
    res("L2-S1", 2, 40.0, "pass", 0.8, "E", "MV-44"),
]
CALS = [
    calibration(0, master_loss_pa=10.0),
    calibration(120, master_loss_pa=11.0, passed=False, reason="ratio out of band"),
    calibration(60, station="L1-S2", program="HX-230", master_loss_pa=8.0),
]
STATUSES = [
    status(0, "online"),
    status(1, "testing"),
    status(2, "fault", station="L2-S1", detail="no answer"),
    status(3, "offline", station="L2-S9"),
]


def _journal(path: Path, items: list) -> Journal:
    j = open_journal(str(path))
    j.write(items)
    return j


@pytest.fixture
def plant(tmp_path: Path):
    path = tmp_path / "plant.db"
    _journal(path, [*PLANT, *CALS, *STATUSES]).close()
    store = open_store(f"sqlite:///{path}")
    yield store
    store.close()


@pytest.fixture
def empty(tmp_path: Path):
    path = tmp_path / "empty.db"
    open_journal(str(path)).close()
    store = open_store(str(path))
    yield store
    store.close()


def _records(frame: pd.DataFrame, cols: list[str]) -> list[tuple]:
    return [tuple(r) for r in frame[cols].itertuples(index=False)]


def test_is_a_query_store(plant: SqliteStore) -> None:
    assert isinstance(plant, QueryStore)


def test_results_round_trip_values(tmp_path: Path) -> None:
    full = result(
        9, lower_limit_sccm=-0.5, temperature_c=21.5, calibration_ref="cal-7",
        ended_at=T0 + timedelta(microseconds=987_654), raw="x;y;Ø", part_family="HX",
        time_source="gateway", supplied=(("lower_limit_sccm", "config"),),
    )  # fmt: skip
    bare = result(10, part_id=None, leak_rate_sccm=None, pressure_loss_pa=None,
                  reject_limit_sccm=None, fill_s=None, verdict=Verdict.GROSS)
    _journal(tmp_path / "r.db", [full, bare]).close()
    with open_store(str(tmp_path / "r.db")) as store:  # type: ignore[attr-defined]
        frame = store.results()
    assert str(frame["ended_at"].dtype).endswith("UTC]")
    row = frame.iloc[0]
    for f in fields(TestResult):
        want = getattr(full, f.name)
        if f.name == "supplied":  # a frame holds it as the journal's JSON text
            assert json.loads(row[f.name]) == {"lower_limit_sccm": "config"}
            continue
        assert row[f.name] == (want.value if hasattr(want, "value") else want), f.name
    assert row["record_id"] == full.record_id
    other = frame.iloc[1]
    assert pd.isna(other["part_id"])  # missing text is pandas NA (pandas 3 str dtype)
    for name in ("leak_rate_sccm", "pressure_loss_pa", "reject_limit_sccm", "fill_s",
                 "supplied", "part_family"):
        assert pd.isna(other[name]), name  # absent stays absent, never a zero
    assert other["time_source"] == "station"


def test_rows_with_filters(plant: SqliteStore) -> None:
    assert len(plant.results()) == 9
    day1 = plant.results(T0, T0 + DAY, line="L1")
    assert list(day1["cycle"]) == [1, 2, 1, 2, 3, 3]  # ordered by ended_at
    assert list(plant.results(station="L1-S2", program="HX-230", limit=2)["cycle"]) == [1, 2]
    newest = plant.results(station="L1-S2", newest_first=True, limit=1)
    assert newest.iloc[0]["cycle"] == 4
    assert list(plant.results(part_id="B")["station"]) == ["L1-S1", "L1-S2"]
    # values travel as parameters: a hostile station name is just a name that matches nothing
    assert plant.results(station="x' OR 1=1 --").empty
    with pytest.raises(ValueError, match="timezone-aware"):
        plant.results(datetime(2026, 3, 2))
    with pytest.raises(ValueError, match="before"):
        plant.results(T0 + DAY, T0)


def test_calibrations_statuses_quarantine(plant: SqliteStore) -> None:
    cals = plant.calibrations(station="L1-S1")
    assert list(cals["master_loss_pa"]) == [10.0, 11.0]
    assert list(cals["passed"]) == [True, False]
    assert cals["passed"].dtype == "boolean"  # nullable: a station may not judge
    assert plant.calibrations(station="L2-S1").empty
    st = plant.statuses(station="L1-S1")
    assert list(st["state"]) == ["online", "testing"]
    assert plant.quarantine().empty


def test_stations_and_latest(plant: SqliteStore) -> None:
    stations = plant.stations()
    assert list(stations["station"]) == ["L1-S1", "L1-S2", "L2-S1", "L2-S9"]
    assert list(stations["line"].iloc[:3]) == ["L1", "L1", "L2"]
    assert pd.isna(stations["line"].iloc[3])  # only ever sent a status: line unknown
    latest = plant.latest_results_per_station()
    assert _records(latest, ["station", "cycle"]) == [("L1-S1", 3), ("L1-S2", 4), ("L2-S1", 2)]
    statuses = plant.latest_status_per_station()
    assert _records(statuses, ["station", "state"]) == [
        ("L1-S1", "testing"), ("L2-S1", "fault"), ("L2-S9", "offline"),
    ]  # fmt: skip
    cals = plant.latest_calibration_per_station()  # L2-S1 never calibrated: no row
    assert _records(cals, ["station", "master_loss_pa"]) == [("L1-S1", 11.0), ("L1-S2", 8.0)]


def test_verdict_counts(plant: SqliteStore) -> None:
    got = plant.verdict_counts()
    assert _records(got, ["station", "verdict", "n"]) == [
        ("L1-S1", "pass", 2), ("L1-S1", "reject", 1),
        ("L1-S2", "gross", 1), ("L1-S2", "pass", 2), ("L1-S2", "reject", 1),
        ("L2-S1", "aborted", 1), ("L2-S1", "pass", 1),
    ]  # fmt: skip
    by_line = plant.verdict_counts(by=("line",), since=T0, until=T0 + DAY)
    assert _records(by_line, ["line", "verdict", "n"]) == [
        ("L1", "gross", 1), ("L1", "pass", 3), ("L1", "reject", 2),
        ("L2", "aborted", 1), ("L2", "pass", 1),
    ]  # fmt: skip
    hourly = plant.verdict_counts(by=("station",), bucket="hour", station="L1-S1")
    assert _records(hourly, ["bucket", "verdict", "n"]) == [
        (pd.Timestamp("2026-03-02 06:00", tz="UTC"), "pass", 1),
        (pd.Timestamp("2026-03-02 06:00", tz="UTC"), "reject", 1),
        (pd.Timestamp("2026-03-02 07:00", tz="UTC"), "pass", 1),
    ]
    daily = plant.verdict_counts(by=(), bucket="day", program="HX-230")
    assert _records(daily, ["bucket", "verdict", "n"]) == [
        (pd.Timestamp("2026-03-02", tz="UTC"), "gross", 1),
        (pd.Timestamp("2026-03-02", tz="UTC"), "pass", 1),
        (pd.Timestamp("2026-03-02", tz="UTC"), "reject", 1),
        (pd.Timestamp("2026-03-03", tz="UTC"), "pass", 1),
    ]
    with pytest.raises(ValueError, match="cannot group by"):
        plant.verdict_counts(by=("station; DROP TABLE results",))  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="bucket"):
        plant.verdict_counts(bucket="week")  # type: ignore[arg-type]


def test_first_pass_counts(plant: SqliteStore) -> None:
    cols = ["station", "parts", "first_pass", "final_pass", "tests", "no_part_id"]
    # A passes first time; B (first tested at L1-S1) fails, then passes at L1-S2; C fails
    # twice; D and E pass first time. Results without part ids: L1-S1 #3, L2-S1 #1.
    assert _records(plant.first_pass_counts(), cols) == [
        ("L1-S1", 2, 1, 2, 3, 1),
        ("L1-S2", 2, 1, 1, 3, 0),
        ("L2-S1", 1, 1, 1, 1, 1),
    ]
    overall = plant.first_pass_counts(by=())
    assert _records(overall, cols[1:]) == [(5, 3, 4, 7, 2)]
    # a part counts where and when its first test happened; filters pick on that first test.
    # D (at exactly T0 + 1 day) falls outside the half-open first day
    day1 = plant.first_pass_counts(T0, T0 + DAY, station="L1-S2")
    assert _records(day1, cols) == [("L1-S2", 1, 0, 0, 2, 0)]
    # B's retest at L1-S2 does not make it an L1-S2 part
    assert _records(plant.first_pass_counts(station="L1-S2"), cols) == [("L1-S2", 2, 1, 1, 3, 0)]
    # a group made only of results without part ids still reports them
    loose = plant.first_pass_counts(T0 + timedelta(minutes=60), T0 + timedelta(minutes=80))
    assert _records(loose, cols) == [("L1-S1", 0, 0, 0, 0, 1)]
    hourly = plant.first_pass_counts(by=("line",), bucket="hour", line="L2")
    assert _records(hourly, ["line", "bucket", "parts", "no_part_id"]) == [
        ("L2", pd.Timestamp("2026-03-02 06:00", tz="UTC"), 1, 1)
    ]


def test_histogram_by_hand(plant: SqliteStore) -> None:
    # readings 0.4 2.5 0.6 9.0 1.0 2.2 0.3 0.0 0.8 against edges 0, 0.5, 1, 2
    h = plant.histogram(None, None, [0, 0.5, 1.0, 2.0])
    assert list(h["n"]) == [0, 3, 2, 1, 3]
    assert h["bin_lo"].iloc[0] == -math.inf and h["bin_hi"].iloc[-1] == math.inf
    assert list(h["bin_lo"].iloc[1:]) == [0, 0.5, 1.0, 2.0]
    one = plant.histogram(T0, T0 + DAY, [0, 1, 10], station="L1-S2", program="HX-230")
    assert list(one["n"]) == [0, 0, 3, 0]  # 9.0, 1.0 (edge → upper bin), 2.2
    with pytest.raises(ValueError):
        plant.histogram(None, None, [1.0])
    with pytest.raises(ValueError):
        plant.histogram(None, None, [0, 2, 1])
    with pytest.raises(ValueError):
        plant.histogram(None, None, [0, 1], value="raw")


def test_leak_summary_by_hand(plant: SqliteStore) -> None:
    row = plant.leak_summary(station="L1-S1").iloc[0]
    assert (row["station"], row["n"], row["min"], row["max"]) == ("L1-S1", 3, 0.4, 2.5)
    # readings 0.4, 2.5, 0.6: mean 3.5 / 3; squared deviations sum to 2.686667, / (3 - 1)
    assert row["mean"] == pytest.approx(3.5 / 3)
    assert row["std"] == pytest.approx(math.sqrt(2.6866667 / 2), rel=1e-6)
    # the aborted test on L2-S1 measured nothing and is left out: one reading, no spread
    single = plant.leak_summary(station="L2-S1").iloc[0]
    assert single["n"] == 1 and single["mean"] == 0.8 and math.isnan(single["std"])


def test_calibration_series(plant: SqliteStore) -> None:
    series = plant.calibration_series("L1-S1", "HX-210")
    assert list(series["master_loss_pa"]) == [10.0, 11.0]
    assert list(series["reason"]) == ["", "ratio out of band"]
    assert str(series["ended_at"].dtype).endswith("UTC]")
    assert len(plant.calibration_series("L1-S1", since=T0 + timedelta(minutes=60))) == 1
    never = plant.calibration_series("L2-S1")
    assert never.empty and "ratio" in never.columns


def test_empty_store(empty: SqliteStore) -> None:
    for frame in (
        empty.stations(), empty.results(), empty.calibrations(), empty.statuses(),
        empty.quarantine(), empty.latest_results_per_station(),
        empty.latest_status_per_station(), empty.latest_calibration_per_station(),
        empty.verdict_counts(bucket="day"), empty.first_pass_counts(),
        empty.first_pass_counts(by=()), empty.leak_summary(), empty.leak_summary(by=()),
        empty.calibration_series("L1-S1"),
    ):  # fmt: skip
        assert frame.empty
    assert "verdict" in empty.verdict_counts().columns
    assert list(empty.histogram(None, None, [0, 1, 2])["n"]) == [0, 0, 0, 0]


def _random_plant(rng: np.random.Generator, n: int) -> list[TestResult]:
    leaks = rng.normal(0.8, 0.35, n).round(3)
    leaks[:5] = [0.0, 0.5, 1.0, 1.5, 2.0]  # exactly on edges, including the last
    return [
        result(
            i,
            station=f"L1-S{i % 3}",
            line="L1",
            program="HX-210" if i % 4 else "HX-230",
            verdict="pass" if leaks[i] < 1.5 else "reject",
            leak_rate_sccm=float(leaks[i]),
            ended_at=T0 + timedelta(seconds=37 * i),
        )
        for i in range(n)
    ]


def test_statistics_match_numpy_and_pandas(tmp_path: Path) -> None:
    rows = _random_plant(np.random.default_rng(7), 2000)
    _journal(tmp_path / "s.db", rows).close()
    frame = pd.DataFrame({
        "station": [r.station for r in rows], "program": [r.program for r in rows],
        "leak": [r.leak_rate_sccm for r in rows],
    })  # fmt: skip
    with SqliteStore(tmp_path / "s.db") as store:
        edges = np.linspace(0.0, 2.0, 21)
        h = store.histogram(None, None, list(edges))
        # reference: numpy.histogram (half-open bins, last bin closed)
        want, _ = np.histogram(frame["leak"], bins=edges)
        assert list(h["n"].iloc[1:-1]) == list(want)
        assert h["n"].iloc[0] == (frame["leak"] < 0).sum()
        assert h["n"].iloc[-1] == (frame["leak"] > 2.0).sum()
        uneven = [-1.0, 0.1, 0.25, 0.9, 1.0, 3.3]
        want_u, _ = np.histogram(frame["leak"], bins=uneven)
        assert list(store.histogram(None, None, uneven)["n"].iloc[1:-1]) == list(want_u)
        # reference: pandas groupby mean / std(ddof=1) / min / max
        ref = frame.groupby(["station", "program"])["leak"].agg(
            ["count", "mean", "std", "min", "max"]
        )
        got = store.leak_summary(by=("station", "program")).set_index(["station", "program"])
        assert list(got["n"]) == list(ref["count"])
        for col in ("mean", "std", "min", "max"):
            np.testing.assert_allclose(got[col], ref[col], rtol=1e-9)


def test_store_is_read_only_and_reads_while_writing(tmp_path: Path) -> None:
    path = tmp_path / "live.db"
    journal = _journal(path, PLANT[:3])
    with SqliteStore(path) as store:
        assert len(store.results()) == 3
        journal.write(PLANT[3:])  # the gateway keeps writing while the dashboard reads
        assert len(store.results()) == 9
        with pytest.raises(sqlite3.OperationalError):
            store._conn.execute("DELETE FROM results")
    journal.close()


def test_open_store_errors(tmp_path: Path) -> None:
    for bad in ("", "mysql://db/x", "sqlite://host/x.db", "http://localhost:8086"):
        with pytest.raises(ConfigError) as info:
            open_store(bad)
        assert "sqlite:///" in str(info.value) or "SQLite" in str(info.value)
    with pytest.raises(StoreError, match="no such file"):
        open_store(f"sqlite:///{tmp_path}/missing.db")
    plain = tmp_path / "plain.db"
    sqlite3.connect(plain).execute("CREATE TABLE t (x)").connection.close()
    with pytest.raises(StoreError, match="not a leakfleet journal"):
        open_store(str(plain))
    if importlib.util.find_spec("gateway.store.influx") is None:
        with pytest.raises(ConfigError, match="not available"):
            open_store("influxdb://127.0.0.1:8086/leakfleet")


def test_registry_dispatches_by_scheme(tmp_path: Path) -> None:
    path = tmp_path / "r.db"
    open_journal(str(path)).close()
    seen: list[str] = []

    def factory(url: str) -> SqliteStore:
        seen.append(url)
        return SqliteStore(path)

    register_store("leakfleet-test", factory)
    store = open_store("leakfleet-test://anything")
    assert seen == ["leakfleet-test://anything"] and store.results().empty
    store.close()


def test_utc_buckets_ignore_local_time(tmp_path: Path) -> None:
    # 23:30 and 00:30 UTC fall in different UTC days whatever the plant's zone
    late = datetime(2026, 3, 2, 23, 30, tzinfo=UTC)
    _journal(
        tmp_path / "b.db", [result(1, ended_at=late), result(2, ended_at=late + timedelta(hours=1))]
    ).close()
    with SqliteStore(tmp_path / "b.db") as store:
        got = store.verdict_counts(by=(), bucket="day")
    assert list(got["bucket"]) == [
        pd.Timestamp("2026-03-02", tz="UTC"),
        pd.Timestamp("2026-03-03", tz="UTC"),
    ]
