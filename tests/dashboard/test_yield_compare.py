"""The Yield page's manager views: comparisons weighted by volume, against a target, filtered by
station and part family, on an axis that does not stretch noise; its print view; the link to
the shift report."""

from __future__ import annotations

import io
import json
import re
import shutil
import sqlite3
from pathlib import Path
from typing import Any

import pyarrow as pa
import pytest

from dashboard.charts import SERIES_COLOURS
from tests.dashboard.conftest import AppFactory

pytestmark = pytest.mark.timeout(120)
PAGE = "views/yields.py"


def _specs(at: Any) -> list[dict[str, Any]]:
    return [json.loads(el.proto.spec) for el in at.get("vega_lite_chart")]


def _metrics(at: Any) -> dict[str, str]:
    return {m.label: m.value for m in at.metric}


def _weighted(at: Any) -> str:
    line = next(m.value for m in at.markdown if "weighted by volume" in m.value)
    found = re.search(r"\*\*([\d.]+%)\*\* weighted", line)
    assert found, line
    return found.group(1)


def test_links_to_the_shift_report(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE)
    assert not at.exception
    pages = [el.proto.page for el in at.get("page_link")]
    assert any("shift" in pg for pg in pages), pages


@pytest.mark.parametrize("choice", ["Day by day", "Week over week", "Shift against shift",
                                    "Same shift across days"])
def test_every_comparison_pools_to_the_page_figure(app: AppFactory, demo_journal: Path,
                                                   choice: str) -> None:
    at = app(demo_journal, PAGE)
    at.selectbox(key="yield_range").set_value("Everything")
    at.selectbox(key="yield_compare").set_value(choice).run()
    assert not at.exception, [e.message for e in at.exception]
    # the periods' volume-weighted yield is the selection's first-pass yield: the same parts
    assert _weighted(at) == _metrics(at)["First-pass yield"]
    table = next(df.value for df in at.dataframe if "Volume" in df.value.columns)
    volume = sum(int(v.replace(",", "")) for v in table["Volume"])
    parts = next(df.value for df in at.dataframe if "Parts" in df.value.columns)["Parts"].sum()
    assert volume == parts


def test_test_yield_measure_counts_tests(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE)
    at.selectbox(key="yield_range").set_value("Everything")
    at.selectbox(key="yield_measure").set_value("test").run()
    assert _weighted(at) == _metrics(at)["Test yield"]


def test_axis_floor_target_line_and_palette(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, PAGE, query={"target": "99.5"})
    assert at.number_input(key="yield_target").value == 99.5
    spec, volume = _specs(at)[:2]
    top = spec["layer"]
    scale = top[0]["encoding"]["y"]["scale"]
    # the demo's yields sit near 96-99 %: the axis runs 90-100 %, not min-max of the data
    assert scale["domain"] == [0.9, 1.0]
    assert any(layer["mark"]["type"] == "rule" for layer in top)
    frames = [pa.ipc.open_stream(io.BytesIO(d.data.data)).read_pandas()
              for d in at.get("vega_lite_chart")[0].proto.datasets]
    target = next(f for f in frames if "what" in f.columns)
    assert target["y"].tolist() == [pytest.approx(0.995)]
    assert target["what"].tolist() == ["target 99.5%"]
    colours = re.findall(r"#[0-9a-fA-F]{6}", json.dumps([spec, volume]))
    assert set(colours) <= set(SERIES_COLOURS)  # Okabe–Ito; no red/green pair
    # volume is shown: sized dots and bars of the same periods
    assert volume["mark"]["type"] == "bar" and volume["encoding"]["y"]["field"] == "total"
    assert top[1]["encoding"]["size"]["field"] == "total"


def test_station_and_part_family_filters(app: AppFactory, demo_journal: Path,
                                         tmp_path: Path) -> None:
    at = app(demo_journal, PAGE)
    at.selectbox(key="yield_station").set_value("L2-S1").run()
    assert not at.exception
    table = next(df.value for df in at.dataframe if "Station" in df.value.columns)
    assert list(table["Station"]) == ["L2-S1"]
    # families named in the records (a program sheet's part_family): HX-210 and HX-230
    path = tmp_path / "families.db"
    shutil.copy(demo_journal, path)
    with sqlite3.connect(path) as conn:
        conn.execute("UPDATE results SET part_family = 'housings' WHERE program LIKE 'HX-%'")
    at = app(path, PAGE)
    assert "housings" in at.selectbox(key="yield_family").options
    at.selectbox(key="yield_range").set_value("Everything")
    at.selectbox(key="yield_group").set_value("Program")
    at.selectbox(key="yield_family").set_value("housings").run()
    assert not at.exception, [e.message for e in at.exception]
    table = next(df.value for df in at.dataframe if "Program" in df.value.columns)
    assert sorted(table["Program"]) == ["HX-210", "HX-230"]
    total = int(_metrics(at)["Tests"].replace(",", ""))
    at.selectbox(key="yield_family").set_value("All")
    at.selectbox(key="yield_line").set_value("L1").run()
    assert int(_metrics(at)["Tests"].replace(",", "")) == total  # L1 runs only HX programs


def test_print_view_carries_the_choices(app: AppFactory, demo_journal: Path) -> None:
    screen = app(demo_journal, PAGE)
    link = [el.proto.query_string for el in screen.get("page_link")
            if "print=1" in el.proto.query_string]
    assert len(link) == 1 and "compare=Day" in link[0]
    at = app(demo_journal, PAGE, query={"print": "1", "compare": "Shift against shift",
                                        "range": "Everything", "station": "L1-S1",
                                        "target": "97"})
    assert not at.exception
    assert "@media print" in " ".join(h.proto.body for h in at.get("html"))
    assert at.selectbox(key="yield_compare").value == "Shift against shift"
    assert at.selectbox(key="yield_station").value == "L1-S1"
    assert not at.dataframe and at.table
    assert {"Compare", "Rejects, Pareto"} <= {s.value for s in at.subheader}
    assert "Trend" not in {s.value for s in at.subheader}


@pytest.fixture(scope="module")
def week_journal(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Two ISO weeks at one station: Monday to Saturday of 2026-W48 with 100 parts a day (99
    pass), a Sunday with 2 parts (both rejected), and Monday of W49 with 100 parts (95 pass)."""
    from datetime import UTC, datetime, timedelta

    from gateway.records import TestResult
    from gateway.store import open_journal

    path = tmp_path_factory.mktemp("week") / "journal.db"
    monday = datetime(2026, 11, 23, 9, 0, tzinfo=UTC)  # 10:00 in Berlin, early shift
    plan = [(d, 100, 99) for d in range(6)] + [(6, 2, 0), (7, 100, 95)]
    records, cycle = [], 0
    for day, n, good in plan:
        for i in range(n):
            cycle += 1
            at = monday + timedelta(days=day, seconds=60 * i)
            records.append(TestResult(
                station="W1", line="LW", cycle=cycle, ended_at=at, received_at=at,
                program="P-1", verdict="pass" if i < good else "reject",
                leak_rate_sccm=0.5 if i < good else 3.0, reject_limit_sccm=2.0,
                part_id=f"W-{cycle:05d}", raw=f"w {cycle}", profile="lf-kv@1"))
    with open_journal(f"sqlite:///{path}") as j:
        j.write(records)
    return path


def test_a_thin_day_counts_by_its_volume(app: AppFactory, week_journal: Path) -> None:
    at = app(week_journal, PAGE, query={"range": "Everything", "compare": "Day by day"})
    assert not at.exception, [e.message for e in at.exception]
    summary = next(m.value for m in at.markdown if "weighted by volume" in m.value)
    # pooled: (6·99 + 0 + 95) / 702 parts; the plain mean of the 8 daily yields is far lower
    assert f"**{689 / 702:.1%}** weighted" in summary
    assert f"{(6 * 0.99 + 0 + 0.95) / 8:.1%} as a plain mean" in summary
    assert "1 of them had under a quarter" in summary
    table = next(df.value for df in at.dataframe if "Share of volume" in df.value.columns)
    sunday = table[table["Day"] == "2026-11-29"].iloc[0]
    assert (sunday["Volume"], sunday["Share of volume"], sunday["Yield"]) == (
        "2", f"{2 / 702:.1%}", "0.0%")
    assert sunday["Against target"] == "-98.0 pp"


def test_week_over_week(app: AppFactory, week_journal: Path) -> None:
    at = app(week_journal, PAGE, query={"range": "Everything", "compare": "Week over week"})
    table = next(df.value for df in at.dataframe if "Week" in df.value.columns)
    assert list(table["Week"]) == ["2026-W48", "2026-W49"]
    assert list(table["From"]) == ["2026-11-23", "2026-11-30"]
    assert list(table["Yield"]) == [f"{594 / 602:.1%}", "95.0%"]
    assert table["Change on the week before"].iloc[1] == f"{(0.95 - 594 / 602) * 100:+.1f} pp"
