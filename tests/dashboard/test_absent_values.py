"""Stations that send little: every page and every report works over records with absent
values (no limits, no times, no clock, gross tests without a reading, calibrations nobody
judged) and never turns an absent value into a zero."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.store import open_store
from tests.dashboard.conftest import AppFactory
from tests.dashboard.journal_fill import SPARSE_STATIONS
from tests.dashboard.test_pages import PAGES

pytestmark = pytest.mark.timeout(180)


@pytest.mark.parametrize("page", PAGES)
def test_pages_render_over_absent_values(app: AppFactory, sparse_journal: Path,
                                         page: str) -> None:  # fmt: skip
    at = app(sparse_journal, page)
    assert not at.exception, [e.message for e in at.exception]
    assert not at.error, [e.value for e in at.error]


def test_absent_readings_stay_out_of_statistics(sparse_journal: Path) -> None:
    with open_store(f"sqlite:///{sparse_journal}") as store:
        rows = store.results()
        summary = store.leak_summary(by=("station",))
    gross = rows[rows["verdict"].isin(["gross", "aborted"])]
    assert len(gross) and gross["leak_rate_sccm"].isna().all()
    measured = rows[rows["verdict"].isin(["pass", "reject"])]
    for station, g in measured.groupby("station"):
        got = summary[summary["station"] == station].iloc[0]
        # the summary counts only tests with a reading; the mean is theirs alone
        assert int(got["n"]) == int(g["leak_rate_sccm"].notna().sum())
        assert math.isclose(float(got["mean"]), float(g["leak_rate_sccm"].mean()), rel_tol=1e-9)
    bare = rows[rows["station"].isin(SPARSE_STATIONS)]
    assert bare["reject_limit_sccm"].isna().all() and (bare["time_source"] == "gateway").all()


REPORTS = [
    ["yield", "--by", "station"],
    ["capability", "--by-station"],
    ["calibration"],
    ["retests"],
    ["standards", "--config", "demo"],
]


@pytest.mark.parametrize("args", REPORTS, ids=[a[0] for a in REPORTS])
def test_reports_over_absent_values(sparse_journal: Path, args: list[str],
                                    capsys: pytest.CaptureFixture[str]) -> None:  # fmt: skip
    url = f"sqlite:///{sparse_journal}"
    assert main(["report", *args, "--store", url]) == 0
    text = capsys.readouterr().out
    assert "Traceback" not in text
    assert main(["report", *args, "--store", url, "--json"]) == 0
    json.loads(capsys.readouterr().out)


def test_shift_report_over_absent_values(sparse_journal: Path,
                                         capsys: pytest.CaptureFixture[str]) -> None:  # fmt: skip
    """Calibrations nobody judged: the station's state says so instead of failing or passing."""
    import pandas as pd

    from analytics import ShiftCalendar
    from gateway.config import load_config
    from gateway.reports.common import newest_record_time

    url = f"sqlite:///{sparse_journal}"
    with open_store(url) as store:
        newest = newest_record_time(store)
        cals = store.calibrations()
    assert newest is not None
    plant = load_config("demo")
    found = ShiftCalendar.from_starts(plant.timezone, dict(plant.shifts)).shift_of(newest)
    assert found is not None
    day, shift = found
    assert main(["report", "shift", "--store", url, "--config", "demo", "--date",
                 day.isoformat(), "--shift", shift, "--json"]) == 0  # fmt: skip
    doc = json.loads(capsys.readouterr().out)
    states = {s["station"]: s for sec in doc["result"]["lines"] for s in sec["stations"]}
    unjudged = cals[cals["passed"].isna()]
    assert len(unjudged)  # the sparse journal has calibrations without a verdict
    checked = 0
    for station, group in cals.sort_values("ended_at").groupby("station"):
        last = group.iloc[-1]
        if station in states and pd.isna(last["passed"]):
            assert states[station]["calibration_state"] == "not judged"
            assert states[station]["last_calibration_passed"] is None
            checked += 1
    assert checked
