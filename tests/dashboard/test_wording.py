"""What people read on the gauge, calibration, quality, data and health pages: column headers
in words with their units (never a field name such as ``master_loss_pa`` or ``days_left``),
no "None" in a cell, cut tables that say so, and the gauge page's warning before it gives
test-time advice from drifting master-part data."""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pandas as pd
import pytest

from gateway.records import CalibrationEvent, TestResult
from gateway.store import open_journal
from tests.dashboard.conftest import AppFactory

pytestmark = pytest.mark.timeout(180)

FIELD = re.compile(r"^[a-z0-9]+(_[a-z0-9]+)*$")  # a field name: lower case, maybe snake_case


def _headers_and_cells_read_as_words(at) -> list[str]:  # type: ignore[no-untyped-def]
    """Every table's headers: none is a field name; no text cell says "None"."""
    seen = []
    for df in at.dataframe:
        frame = df.value
        for col in frame.columns:
            name = str(col)
            assert not FIELD.match(name), f"field name as a header: {name!r}"
            assert "_" not in name, name
            seen.append(name)
        for col in frame.columns:
            if frame[col].dtype == object:
                assert not (frame[col].astype(str) == "None").any(), (col, "None shown")
    return seen


@pytest.mark.parametrize("page", ["views/calibration.py", "views/gauge.py",
                                  "views/quality.py", "views/data_view.py",
                                  "views/health.py"])
def test_tables_speak_words_with_units(app: AppFactory, demo_journal: Path, page: str) -> None:
    at = app(demo_journal, page)
    assert not at.exception, [e.message for e in at.exception]
    headers = _headers_and_cells_read_as_words(at)
    if page in ("views/quality.py", "views/data_view.py", "views/health.py"):
        assert headers  # these pages have tables on the demo
    if page == "views/data_view.py":
        assert {"Leak rate [sccm]", "Test pressure [Pa]", "Fill [s]", "Ended"} <= set(headers)
        at.selectbox(key="data_kind").set_value("state changes").run()
        assert {"State", "Detail"} <= set(_headers_and_cells_read_as_words(at))
        at.selectbox(key="data_kind").set_value("calibrations").run()
        cols = _headers_and_cells_read_as_words(at)
        assert {"Master loss [Pa]", "Sensitivity [sccm/Pa]"} <= set(cols)
        at.sidebar.selectbox(key="lf_pressure_unit").set_value("kPa").run()
        assert "Master loss [kPa]" in _headers_and_cells_read_as_words(at)
    if page == "views/quality.py":
        from gateway.store import open_store

        store = open_store(str(demo_journal))
        pid = str(store.results(station="L1-S3", limit=1)["part_id"].iloc[0])
        store.close()
        at.text_input(key="q_part").input(pid).run()
        cols = _headers_and_cells_read_as_words(at)
        assert {"Leak rate [sccm]", "Calibration in force"} <= set(cols)
        share = next(m.value for m in at.metric if m.label == "Share of passes needing a retest")
        assert re.fullmatch(r"\d+\.\d %|–", share)  # one decimal, as every page prints them


def _drifting_journal(path: Path, slope_pa_per_day: float) -> None:
    """One station, 30 daily calibrations of program P-1 whose master loss moves by
    ``slope_pa_per_day`` a day (plus a small alternating scatter), and one result so the page
    knows the test time and limits."""
    now = datetime.now(UTC).replace(microsecond=0)
    records: list[TestResult | CalibrationEvent] = []
    for day in range(30):
        at = now - timedelta(days=29 - day, hours=1)
        master = 20.0 + slope_pa_per_day * day + (0.3 if day % 2 else -0.3)
        standard = master + 40.0
        records.append(CalibrationEvent(
            station="S-1", line="L1", ended_at=at, received_at=at, program="P-1",
            master_loss_pa=master, standard_loss_pa=standard, standard_sccm=2.0,
            standard_ref_pressure_pa=300_000.0, ratio=standard / master,
            sensitivity=2.0 / 40.0, passed=True))  # fmt: skip
    records.append(TestResult(
        station="S-1", line="L1", cycle=1, ended_at=now - timedelta(minutes=5),
        received_at=now - timedelta(minutes=5), program="P-1", verdict="pass",
        test_pressure_pa=300_000.0, pressure_loss_pa=21.0, leak_rate_sccm=0.5,
        reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=6.0, test_s=4.0, part_id="A-1"))
    with open_journal(f"sqlite:///{path}") as j:
        j.write(records)


@pytest.mark.parametrize(("slope", "warned"), [(1.0, True), (0.0, False)])
def test_gauge_warns_before_advice_from_drifting_master_data(
        app: AppFactory, tmp_path: Path, slope: float, warned: bool) -> None:
    path = tmp_path / f"drift-{slope}.db"
    _drifting_journal(path, slope)
    at = app(path, "views/gauge.py")
    assert not at.exception, [e.message for e in at.exception]
    drift = [w.value for w in at.warning if "drift" in w.value]
    assert bool(drift) is warned, [w.value for w in at.warning]
    if warned:
        # the warning comes before the advice, and names the trend in the chosen unit
        assert "Pa per day" in drift[0] and "not to be trusted" in drift[0]
        assert "%GRR now" in [m.label for m in at.metric]
        # the same trend raises chart alarms on the calibration page: their table in words
        at.switch_page("views/calibration.py").run()
        at.selectbox(key="cal_range").set_value("Last 30 days").run()
        assert {"At", "Rule", "Measured", "Message"} <= set(
            _headers_and_cells_read_as_words(at))


def test_cut_tables_say_how_many_rows_were_cut() -> None:
    from dashboard.display import Units, cut_note, labelled

    assert cut_note(1000, 5210) == "Showing 1,000 of 5,210 rows; 4,210 cut."
    assert cut_note(10, 10) is None
    assert "may be more" in (cut_note(1000, None) or "")
    shown = labelled(pd.DataFrame({"days_left": [3], "master_loss_pa": [12.5],
                                   "temperature_c": [None], "share": [0.1234]}), Units("kPa"))
    assert list(shown.columns) == ["Days left", "Master loss [kPa]", "Temperature [°C]",
                                   "Share of passes retested [%]"]
    # 12.5 Pa = 0.0125 kPa (SI prefix); an absent value reads "–", never "None"
    assert shown.iloc[0].tolist() == [3, 0.0125, "–", pytest.approx(12.34)]


def test_health_says_a_sink_never_sent_a_kind(app: AppFactory, tmp_path: Path) -> None:
    """A Sparkplug sink never carries alarm events: the health page does not show them as an
    ageing backlog but says none was ever sent."""
    from analytics.alarms import Condition, transitions
    from gateway.store.logbook import Logbook

    path = tmp_path / "sinks.db"
    _drifting_journal(path, 0.0)
    with open_journal(f"sqlite:///{path}") as j:
        j.set_cursor("scada", "result", j.max_seq("result"))
        Logbook(j).apply(transitions([Condition("silent:S-1", "silent", "S-1", "warning",
                                                datetime.now(UTC), "no result")], []))
    at = app(path, "views/health.py")
    sinks = next(d.value for d in at.dataframe if "Oldest waiting for" in d.value.columns)
    rows = {r["Records"]: r for r in sinks.to_dict("records")}
    assert rows["alarm"]["Waiting"] == 1
    assert rows["alarm"]["Oldest waiting for"].startswith("never sent one")
    assert rows["result"]["Oldest waiting for"] == "–"
    _headers_and_cells_read_as_words(at)
