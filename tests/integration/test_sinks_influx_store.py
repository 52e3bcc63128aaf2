"""InfluxStore (InfluxQL on a real InfluxDB) answers as SqliteStore does on the same records:
the records go journal → InfluxDB sink → InfluxDB, and both stores are asked the same things."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterator
from datetime import timedelta

import pandas as pd
import pytest

from gateway.records import Record, TestResult
from gateway.store import open_journal, open_store
from gateway.store.base import QueryStore
from tests.integration.sinks_data import T0, into_influx, result, shift
from tests.support.servers import InfluxServer

pytestmark = [pytest.mark.integration, pytest.mark.timeout(90)]


def plant() -> list[Record]:
    records = shift(1, 150)
    # re-tests of parts already tested (first fail, then pass), aborted tests, awkward text
    records += [
        result("L1-S1", 400, part_id="HX-210-000001", verdict="pass", leak_rate_sccm=0.3),
        result("L1-S1", 401, part_id="HX-210-000002", verdict="reject", leak_rate_sccm=2.2),
        result("L1-S2", 402, part_id="HX-210-000003", verdict="pass", leak_rate_sccm=0.4),
        result("L2-S1", 403, verdict="aborted", leak_rate_sccm=0.0, reason='operator "stop"'),
        result("L2-S1", 404, raw='a,b=c d\\e "f" =x', reason="tab\there"),
    ]
    # reject reasons as stations report them (a few rejects give none)
    reasons = ("leak above limit", "pressure loss high", "")
    return [
        dataclasses.replace(r, reason=reasons[r.cycle % 3])
        if isinstance(r, TestResult) and r.verdict in ("reject", "gross") and not r.reason
        else r
        for r in records
    ]


@pytest.fixture(scope="module", params=["part summaries", "tests only"])
def stores(influxdb: InfluxServer, tmp_path_factory: pytest.TempPathFactory,
           request: pytest.FixtureRequest) -> Iterator[tuple[QueryStore, QueryStore]]:
    """The SQLite journal and an InfluxDB fed from it by the sink: with the part summaries
    the sink writes from the journal, and without them (a database an older sink wrote,
    where first-pass yield is judged from the tests themselves)."""

    path = tmp_path_factory.mktemp("store") / "journal.db"
    journal = open_journal(str(path))
    journal.write(plant())
    db = "compare_parts" if request.param == "part summaries" else "compare_tests"
    influxdb.create_database(db)
    # small batches: a retest reaches InfluxDB in a later batch than its part's first test,
    # and the part's summary points are overwritten with its new final verdict
    into_influx(journal, influxdb.url(db), summaries=request.param == "part summaries",
                batch_size=7)
    journal.close()
    sqlite = open_store(f"sqlite:///{path}")
    influx = open_store(influxdb.url(db))
    yield sqlite, influx
    sqlite.close()
    influx.close()
    influxdb.drop_database(db)


H = timedelta(hours=1)
M = timedelta(minutes=1)
S = timedelta(seconds=1)
QUERIES: dict[str, Callable[[QueryStore], pd.DataFrame]] = {
    "stations": lambda s: s.stations(),
    "results": lambda s: s.results(),
    "results station+range": lambda s: s.results(T0 + H, T0 + 2 * H, station="L1-S2"),
    "results part": lambda s: s.results(part_id="HX-210-000001"),
    "results newest 7": lambda s: s.results(line="L1", limit=7, newest_first=True),
    "calibrations": lambda s: s.calibrations(),
    "calibrations program": lambda s: s.calibrations(program="MV-44"),
    "statuses": lambda s: s.statuses(station="L1-S1"),
    "latest results": lambda s: s.latest_results_per_station(),
    "latest status": lambda s: s.latest_status_per_station(),
    "latest calibration": lambda s: s.latest_calibration_per_station(),
    "verdicts by station": lambda s: s.verdict_counts(),
    "verdicts by line, program, hour": lambda s: s.verdict_counts(
        by=("line", "program"), bucket="hour"),
    "verdicts by day, range": lambda s: s.verdict_counts(
        T0 + timedelta(minutes=17), T0 + 3 * H, by=(), bucket="day"),
    "verdicts by reason": lambda s: s.verdict_counts(by=("reason",)),
    "verdicts by station, reason, hour, range": lambda s: s.verdict_counts(
        T0 + timedelta(minutes=17), T0 + 5 * H, by=("station", "reason"), bucket="hour",
        line="L1"),
    "verdicts by reason, day": lambda s: s.verdict_counts(by=("program", "reason"), bucket="day"),
    "first pass by station": lambda s: s.first_pass_counts(),
    "first pass by line, hour": lambda s: s.first_pass_counts(by=("line",), bucket="hour"),
    "first pass at one station": lambda s: s.first_pass_counts(station="L1-S1", by=()),
    # HX-210-000003 is first tested at L1-S1, retested at L1-S2: an L1-S1 part
    "first pass at the retest station": lambda s: s.first_pass_counts(station="L1-S2", by=()),
    "first pass, retests after the range": lambda s: s.first_pass_counts(
        T0, T0 + H, station="L1-S1", by=("program",)),
    "first pass, only retests in range": lambda s: s.first_pass_counts(T0 + 2 * H, None),
    # more parts than one history statement takes (several statements, one request)
    "first pass on a line, range": lambda s: s.first_pass_counts(
        T0, T0 + 3 * H, line="L1", by=("station",)),
    "first pass by program, day, until": lambda s: s.first_pass_counts(
        None, T0 + H, by=("program",), bucket="day", line="L1"),
    # ragged ends: whole hours from the hourly summary, the ends from the per-part points
    "first pass, ragged range": lambda s: s.first_pass_counts(
        T0 + 17 * M, T0 + 2 * H + 41 * M, by=("station",), bucket="hour"),
    "first pass, within one hour": lambda s: s.first_pass_counts(
        T0 + H + 5 * M, T0 + H + 50 * M, by=()),
    "first pass, ragged since only": lambda s: s.first_pass_counts(T0 + 23 * M, None),
    # cycle 1's part is retested as cycle 400 (T0 + 4 h 6 min 40 s): counted with its first
    # test's window and its final verdict, not again in the retest's
    "first pass, a first test in a ragged end": lambda s: s.first_pass_counts(
        T0 + 30 * S, T0 + 50 * M, by=("station",)),
    "first pass, only a retest in a ragged end": lambda s: s.first_pass_counts(
        T0 + 4 * H + 5 * M, T0 + 4 * H + 10 * M, by=()),
    "histogram": lambda s: s.histogram(None, None, [0.0, 0.5, 1.0, 1.5, 2.0, 2.25]),
    "histogram pressure loss": lambda s: s.histogram(
        T0, T0 + 2 * H, [0.0, 10.0, 20.0, 40.0], station="L1-S1", value="pressure_loss_pa"),
    "leak summary": lambda s: s.leak_summary(),
    "leak summary by line, hour": lambda s: s.leak_summary(by=("line",), bucket="hour"),
    "calibration series": lambda s: s.calibration_series("L1-S2"),
    "quarantine (not forwarded)": lambda s: s.quarantine().iloc[0:0],
    "nothing in range": lambda s: s.verdict_counts(T0 - 10 * H, T0 - 9 * H),
}


@pytest.mark.parametrize("name", list(QUERIES))
def test_same_answer(stores: tuple[QueryStore, QueryStore], name: str) -> None:
    sqlite, influx = stores
    want = QUERIES[name](sqlite)
    got = QUERIES[name](influx)
    assert len(want) > 0 or name in ("nothing in range", "quarantine (not forwarded)")
    pd.testing.assert_frame_equal(got, want, check_dtype=False, check_exact=False, rtol=1e-9)


def test_awkward_text_survives(stores: tuple[QueryStore, QueryStore]) -> None:
    _, influx = stores
    rows = influx.results(station="L2-S1", newest_first=True, limit=2)
    raw = rows.loc[rows["cycle"] == 404, "raw"].item()
    assert raw == 'a,b=c d\\e "f" =x'  # commas, equals, spaces, quotes, backslash
    assert rows.loc[rows["cycle"] == 404, "reason"].item() == "tab\there"



def test_first_pass_by_hand(stores: tuple[QueryStore, QueryStore]) -> None:
    """Parts first tested at one station, each judged by all its tests (by hand from the rows;
    first-pass yield: a part's first test decides, common practice)."""
    sqlite, influx = stores
    rows = sqlite.results()
    tests = rows[rows["part_id"].notna()].sort_values(["ended_at", "seq"])
    by_part = tests.groupby("part_id")
    first, last = by_part.first(), by_part.last()
    mine = first.index[first["station"] == "L1-S1"]
    want = {
        "parts": len(mine),
        "first_pass": int((first.loc[mine, "verdict"] == "pass").sum()),
        "final_pass": int((last.loc[mine, "verdict"] == "pass").sum()),
        "tests": int(by_part.size()[mine].sum()),
        "no_part_id": int((rows["part_id"].isna() & (rows["station"] == "L1-S1")).sum()),
    }
    # the retested parts: one re-tested at the same station, one at another
    assert last.loc["HX-210-000003", "station"] == "L1-S2"
    assert by_part.size()["HX-210-000001"] == 2
    for store in (sqlite, influx):
        got = store.first_pass_counts(station="L1-S1", by=()).iloc[0].to_dict()
        assert {k: int(v) for k, v in got.items()} == want
        # the groups add up: a station filter is that station's row of the grouped answer
        grouped = store.first_pass_counts().set_index("station").loc["L1-S1"].to_dict()
        assert {k: int(v) for k, v in grouped.items()} == want


def test_the_sink_writes_the_journal_part_summaries(stores: tuple[QueryStore, QueryStore],
                                                    request: pytest.FixtureRequest) -> None:
    """With a journal to read, the sink mirrors its per-part and hourly part summaries, and
    first-pass yield is read from them (compared with the journal's in the tests above)."""
    _, influx = stores
    written = influx._query("SELECT * FROM leak_part_hours LIMIT 1")  # type: ignore[attr-defined]
    assert bool(written) == (request.node.callspec.params["stores"] == "part summaries")
