"""The station page: opened from a fleet tile, its leak rate against the limit, calibrations,
alarms with their state, maintenance on the chart, link, quarantine, config; its print view."""

from __future__ import annotations

import io
import json
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pytest

from analytics.alarms import Condition, Transition
from dashboard import charts
from gateway.records import MaintenanceEvent
from gateway.store import open_journal
from gateway.store.logbook import Logbook
from tests.dashboard.conftest import AppFactory

pytestmark = pytest.mark.timeout(120)
PAGE = "views/station.py"


def _charts(at: Any) -> list[tuple[dict[str, Any], dict[str, pd.DataFrame]]]:
    """Every Vega-Lite chart on the page: its spec and its datasets as frames."""
    out = []
    for el in at.get("vega_lite_chart"):
        frames = {d.name: pa.ipc.open_stream(io.BytesIO(d.data.data)).read_pandas()
                  for d in el.proto.datasets}
        out.append((json.loads(el.proto.spec), frames))
    return out


def _frame_with(at: Any, column: str) -> pd.DataFrame:
    for _, frames in _charts(at):
        for f in frames.values():
            if column in f.columns:
                return f
    raise AssertionError(f"no chart data with {column!r}")


def _table(at: Any, *columns: str) -> pd.DataFrame:
    for df in at.dataframe:
        if set(columns) <= set(df.value.columns):
            return df.value
    shown = [list(d.value.columns) for d in at.dataframe]
    raise AssertionError(f"no table with {columns}: {shown}")


def test_every_fleet_tile_links_to_its_station_page(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/fleet.py")
    links = [el.proto for el in at.get("page_link") if "station=" in el.proto.query_string]
    tiles = [link for link in links if link.label.startswith("Station page of")]
    assert sorted(link.query_string for link in tiles) == [
        f"station={s}" for s in ("L1-S1", "L1-S2", "L1-S3", "L2-S1", "L2-S2", "L2-S3")]
    assert all("station" in link.page for link in links)
    kiosk = app(demo_journal, "views/fleet.py", query={"kiosk": "1"})
    assert not [el for el in kiosk.get("page_link") if "station=" in el.proto.query_string]


def test_station_page_shows_the_station_the_link_names(app: AppFactory,
                                                       demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "L2-S1"})
    assert not at.exception, [e.message for e in at.exception]
    assert at.selectbox(key="station_pick").value == "L2-S1"
    metrics = {m.label: m.value for m in at.metric}
    assert metrics["Line"] == "L2"
    assert int(metrics["Tests in range"].replace(",", "")) > 100
    assert {"Leak rate against the reject limit", "Calibrations", "Alarms",
            "Maintenance and notes", "Link: state changes and gaps", "Quarantined lines",
            "Config and profile"} <= {s.value for s in at.subheader}
    # the demo config's entry: transport, profile, endpoint
    config = " ".join(m.value for m in at.markdown)
    assert "lf-delim" in config and "tcp://127.0.0.1:15102" in config
    assert "**Transport** serial" in config
    # the garbage line the fill wrote for this station, with its reason
    q = _table(at, "Reason", "As received")
    assert list(q["Reason"]) == ["no field separator"]
    text = " ".join(str(v) for df in at.dataframe for v in df.value.astype(str).to_numpy().ravel())
    assert "None" not in text and "nan" not in text.split()


def test_a_modbus_station_lists_its_program_table(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "L1-S2"})
    programs = _table(at, "Program no.", "Program")
    assert dict(zip(programs["Program no."], programs["Program"], strict=True)) == {
        1: "HX-210", 2: "HX-230"}
    assert "**Transport** modbus" in " ".join(m.value for m in at.markdown)


def test_reject_limit_is_the_tests_limit_and_the_lower_limit_is_named_apart(
    app: AppFactory, demo_journal: Path
) -> None:
    at = app(demo_journal, PAGE, query={"station": "L1-S1"})
    program = at.selectbox(key="station_program").value
    limits = _frame_with(at, "what")
    reject = limits[limits["what"] == "reject limit"]
    with open_journal(f"sqlite:///{demo_journal}") as j:
        rows = j._query("SELECT DISTINCT reject_limit_sccm, lower_limit_sccm FROM results "
                        "WHERE station = 'L1-S1' AND program = ?", (program,), "test")
    assert sorted(reject["value"]) == sorted({r[0] for r in rows})
    lower = limits[limits["what"] != "reject limit"]
    assert set(lower["what"]) == {"lower plausibility limit (not a reject limit)"}
    assert sorted(lower["value"]) == sorted({r[1] for r in rows if r[1] is not None})
    assert any("not a reject limit" in c.value for c in at.caption)


def test_a_station_without_limits_says_so(app: AppFactory, sparse_journal: Path) -> None:
    at = app(sparse_journal, PAGE, query={"station": "L2-S2"})
    assert not at.exception
    assert any("No reject limit" in c.value for c in at.caption)


@pytest.fixture()
def logged_journal(demo_journal: Path, tmp_path: Path) -> Path:
    """The demo journal with a seal change on L1-S3 and two alarms, one acknowledged."""
    path = tmp_path / "logged.db"
    shutil.copy(demo_journal, path)
    now = datetime.now(UTC).replace(microsecond=0)
    with open_journal(f"sqlite:///{path}") as j:
        book = Logbook(j)
        book.add_maintenance(MaintenanceEvent("L1-S3", now - timedelta(hours=2), "seal change",
                                              "worn lip seal", "R. Okafor"))
        raised = [Condition(f"streak:L1-S3:{i}", "reject_streak", "L1-S3", "alarm",
                            now - timedelta(minutes=30 + i), f"{5 + i} rejects in a row")
                  for i in range(2)]
        book.apply([Transition(c.key, "raise", c) for c in raised], at=now)
        first = book.open_alarms()[0]
        book.acknowledge(first.id, "K. Lind", at=now)
    return path


def test_alarms_with_state_and_maintenance_on_the_chart(app: AppFactory,
                                                        logged_journal: Path) -> None:
    at = app(logged_journal, PAGE, query={"station": "L1-S3"})
    assert not at.exception, [e.message for e in at.exception]
    alarms = _table(at, "State", "What", "Acknowledged")
    assert sorted(alarms["State"]) == ["acknowledged", "active"]
    assert alarms["State"].iloc[0] == "active"  # open, unacknowledged first
    acked = alarms[alarms["State"] == "acknowledged"].iloc[0]
    assert acked["Acknowledged"].startswith("K. Lind at ")
    events = _frame_with(at, "kind")
    assert list(events["kind"]) == ["seal change"] and list(events["note"]) == ["worn lip seal"]
    maint = _table(at, "When", "What", "Note", "By")
    assert list(maint["By"]) == ["R. Okafor"]
    # another station does not show L1-S3's alarms
    at2 = app(logged_journal, PAGE, query={"station": "L1-S1"})
    assert any("No alarms for this station" in c.value for c in at2.caption)


def test_times_follow_the_zone_picked_in_the_sidebar(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "L1-S1"})
    berlin = _table(at, "When", "Outcome")["When"].iloc[0]
    at.sidebar.selectbox(key="lf_timezone").set_value("UTC").run()
    utc = _table(at, "When", "Outcome")["When"].iloc[0]
    # Europe/Berlin is UTC+1 in December (IANA tz database)
    assert (pd.Timestamp(berlin) - pd.Timestamp(utc)) == pd.Timedelta(hours=1)


def test_an_unknown_station_falls_back_with_a_warning(app: AppFactory,
                                                      demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "NOPE"})
    assert not at.exception
    assert any("no station 'NOPE'" in w.value for w in at.warning)


def test_empty_store_says_so(app: AppFactory, empty_journal: Path) -> None:
    at = app(empty_journal, PAGE)
    assert not at.exception
    assert any("no records yet" in i.value for i in at.info)


def test_print_view_hides_widgets_and_sets_the_paper(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "L1-S2", "print": "1", "paper": "letter",
                                        "range": "Last 24 hours"})
    assert not at.exception
    css = " ".join(h.proto.body for h in at.get("html"))
    assert "@media print" in css and "size: letter portrait" in css
    assert "stSidebar" in css and "stSelectbox" in css
    assert at.selectbox(key="station_range").value == "Last 24 hours"
    assert not at.dataframe  # plain tables on paper
    assert at.table
    assert not [el for el in at.get("page_link") if "print=1" in el.proto.query_string]
    screen = app(demo_journal, PAGE, query={"station": "L1-S2"})
    link = [el.proto for el in screen.get("page_link") if "print=1" in el.proto.query_string]
    assert len(link) == 1 and "station=L1-S2" in link[0].query_string


def test_limit_chart_layers_do_not_share_a_colour_legend_with_verdicts() -> None:
    t = pd.to_datetime(["2026-12-01T10:00Z", "2026-12-01T11:00Z"], utc=True).tz_localize(None)
    limits = pd.DataFrame({"start": t[:1], "end": t[1:], "value": [2.0], "tests": [5],
                           "what": ["reject limit"]})
    spec = charts.station_leak(pd.DataFrame(), pd.DataFrame(), limits, pd.DataFrame(),
                               "sccm").to_dict()
    rule = spec["layer"][0]
    assert rule["mark"]["type"] == "rule"
    assert rule["encoding"]["color"]["scale"]["domain"][0] == "reject limit"


def test_the_address_follows_the_station_picked(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "L1-S1"})
    at.selectbox(key="station_pick").set_value("L2-S3").run()
    assert not at.exception
    assert at.query_params["station"] == "L2-S3"
    assert {m.label: m.value for m in at.metric}["Line"] == "L2"


def test_calibrations_are_marked_on_the_time_chart(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"station": "L1-S2"})
    marks = _frame_with(at, "outcome")
    with open_journal(f"sqlite:///{demo_journal}") as j:
        n = j._query("SELECT COUNT(*) FROM calibrations WHERE station = 'L1-S2'", (), "test")[0][0]
    assert len(marks) == n > 0
    assert set(marks["outcome"]) <= {"passed", "FAILED"}
    table = _table(at, "When", "Outcome")
    assert len(table) == n and sorted(table["Outcome"]) == sorted(marks["outcome"])
