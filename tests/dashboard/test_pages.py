"""Every page against a journal the simulator filled: renders without an exception, shows its
figures, reacts to its filters; and the messages for an empty, a lone and an unreachable store."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pandas as pd
import pytest

from tests.dashboard.conftest import AppFactory

pytestmark = pytest.mark.timeout(120)

PAGES = [
    "views/fleet.py",
    "views/yields.py",
    "views/shift.py",
    "views/readings.py",
    "views/calibration.py",
    "views/gauge.py",
    "views/quality.py",
    "views/data_view.py",
    "views/health.py",
    "views/traces.py",
]


def _metrics(at) -> dict[str, str]:  # type: ignore[no-untyped-def]
    return {m.label: m.value for m in at.metric}


def _table(at, *columns: str):  # type: ignore[no-untyped-def]
    """The first table on the page that has all ``columns``."""
    for df in at.dataframe:
        if set(columns) <= set(df.value.columns):
            return df.value
    raise AssertionError(
        f"no table with {columns}: {[list(d.value.columns) for d in at.dataframe]}"
    )


@pytest.mark.parametrize("page", PAGES)
def test_page_renders_without_error(app: AppFactory, demo_journal: Path, page: str) -> None:
    at = app(demo_journal, page)
    assert not at.exception, [e.message for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    # the safety note is on every page (sidebar)
    assert any("pressure ratings" in i.value for i in at.sidebar.info)


def test_fleet_tiles_per_station(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/fleet.py")
    names = " ".join(m.value for m in at.markdown)
    assert names.count("cycles in the last hour") == 6  # one tile per demo station
    assert names.count("yield today") == 6
    for station in ("L1-S1", "L1-S2", "L1-S3", "L2-S1", "L2-S2", "L2-S3"):
        assert f"**{station}**" in names
    assert {"Line L1", "Line L2"} <= {s.value for s in at.subheader}
    # worst first: tile badges carry the level in words and shapes, in rank order per line
    badges = [m.value for m in at.markdown if m.value.startswith("**L")]
    order = ["ALARM", "OFFLINE", "WARNING", "OK", "NO DATA"]
    levels = [next(i for i, w in enumerate(order) if w in b) for b in badges]
    assert levels[:3] == sorted(levels[:3]) and levels[3:] == sorted(levels[3:])
    import re

    cycles = [int(n) for n in re.findall(r"\*\*(\d+)\*\* cycles in the last hour", names)]
    assert len(cycles) == 6
    assert all(n > 20 for n in cycles)  # a demo station tests every ~25-40 s
    # station detail: picking another station shows its own latest results
    table = _table(at, "cycle", "program")
    assert set(table["program"]) <= {"HX-210", "HX-230"}
    at.selectbox(key="fleet_station").set_value("L2-S1").run()
    assert set(_table(at, "cycle", "program")["program"]) == {"MV-44"}


def test_yield_grouping_changes_the_table(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/yields.py")
    m = _metrics(at)
    assert int(m["Tests"].replace(",", "")) > 1000
    assert m["First-pass yield"].endswith("%")
    assert len(_table(at, "Station")) == 6  # by station
    at.selectbox(key="yield_group").set_value("Program").run()
    assert not at.exception
    assert set(_table(at, "Program")["Program"]) == {"HX-210", "HX-230", "MV-44"}
    at.selectbox(key="yield_group").set_value("Shift").run()
    assert not at.exception
    assert len(_table(at, "Shift")) >= 1
    at.selectbox(key="yield_group").set_value("Station").run()
    at.selectbox(key="yield_line").set_value("L2").run()
    assert set(_table(at, "Station")["Station"]) == {"L2-S1", "L2-S2", "L2-S3"}


def test_readings_side_by_side_and_capability(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/readings.py")
    assert [m.label for m in at.metric].count("Ppu (applies)") == 2  # L1-S1, L1-S2
    # which figure applies, and why, is said in words (ISO 22514-2: the percentile method
    # for readings that are not normal)
    applies = [c.value for c in at.caption if c.value.startswith("Applies: Ppu on the ")]
    assert len(applies) == 2 and all("normal" in a for a in applies), applies
    at.selectbox(key="read_program").set_value("MV-44").run()
    assert not at.exception
    assert [m.label for m in at.metric].count("Ppu (applies)") == 3
    at.multiselect(key="read_stations_MV-44").set_value(["L2-S2"]).run()
    assert [m.label for m in at.metric].count("Ppu (applies)") == 1


def test_calibration_page_charts_and_station_filter(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/calibration.py")
    first = int(_metrics(at)["Calibrations"])
    assert first >= 2
    at.selectbox(key="cal_station").set_value("L2-S2").run()
    assert not at.exception
    assert int(_metrics(at)["Calibrations"]) >= 5
    assert any(m.value.startswith("**Drift of the master loss:**") for m in at.markdown)


def test_gauge_page_from_store_and_upload(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/gauge.py")
    assert any("qualified person" in w.value for w in at.warning)
    at.selectbox(key="gauge_station").set_value("L2-S2").run()
    m = _metrics(at)
    assert "Cg (repeatability)" in m and "%GRR now" in m
    assert m["Shortest test time for target"].endswith(" s")


def test_quality_part_history_search(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/quality.py")
    assert "Parts" in _metrics(at)
    assert len(_table(at, "Passes", "Share of passes retested [%]")) >= 1
    from gateway.store import open_store

    store = open_store(str(demo_journal))
    pid = str(store.results(station="L1-S3", limit=1)["part_id"].iloc[0])
    store.close()
    at.text_input(key="q_part").input(pid).run()
    assert not at.exception
    history = _table(at, "Calibration in force")
    assert set(history["Station"]) == {"L1-S3"}
    assert _metrics(at)["Tests"] == str(len(history))
    at.text_input(key="q_part").input("NO-SUCH-PART").run()
    assert any("No tests of part" in i.value for i in at.info)


def test_data_filters_and_quarantine(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/data_view.py")
    table = _table(at, "Station", "Record id")
    assert len(table) == 1000 and table["Station"].nunique() == 6
    assert any(c.value.startswith("Showing 1,000 of ") for c in at.caption)  # cut, and by how much
    at.selectbox(key="data_station").set_value("L1-S3").run()
    assert set(_table(at, "Station", "Record id")["Station"]) == {"L1-S3"}
    at.selectbox(key="data_kind").set_value("calibrations").run()
    cal = _table(at, "Ratio (standard / master)")
    assert len(cal) >= 1
    quarantine = _table(at, "Raw input", "Reason", "Line no.")
    assert list(quarantine["Reason"]) == ["no field separator"]


def test_units_switch_changes_shown_values(app: AppFactory, demo_journal: Path) -> None:
    at = app(demo_journal, "views/data_view.py")
    sccm = pd.to_numeric(_table(at, "Leak rate [sccm]")["Leak rate [sccm]"], errors="coerce")
    at.sidebar.selectbox(key="lf_leak_unit").set_value("mbar*L/s").run()
    mbarl = pd.to_numeric(_table(at, "Leak rate [mbar·L/s]")["Leak rate [mbar·L/s]"],
                          errors="coerce")
    # 1 sccm = 101325 Pa · 1e-6 m³ / 60 s = 1.68875e-3 Pa·m³/s = 1.68875e-2 mbar·L/s
    # (definition of the standard cm³ per minute at 101.325 kPa, 0 °C reference)
    ratio = (mbarl / sccm).dropna()
    assert ratio.between(0.0168874, 0.0168876).all()


# -- messages instead of tracebacks ------------------------------------------------------------


@pytest.mark.parametrize("page", PAGES)
def test_empty_store_says_so(app: AppFactory, empty_journal: Path, page: str) -> None:
    at = app(empty_journal, page)
    assert not at.exception
    assert any("no records yet" in i.value for i in at.info)


@pytest.mark.parametrize("page", ["views/fleet.py", "views/yields.py", "views/data_view.py"])
def test_unreachable_store_says_so(app: AppFactory, tmp_path: Path, page: str) -> None:
    at = app(tmp_path / "missing" / "journal.db", page)
    assert not at.exception
    assert any("cannot be read" in e.value and "no such file" in e.value for e in at.error)


def test_not_a_journal_says_so(app: AppFactory, tmp_path: Path) -> None:
    bogus = tmp_path / "notes.db"
    bogus.write_text("this is not a database\n" * 100)
    at = app(bogus, "views/fleet.py")
    assert not at.exception
    assert any("cannot be read" in e.value for e in at.error)


def test_bad_config_is_one_line(app: AppFactory, demo_journal: Path, tmp_path: Path) -> None:
    cfg = tmp_path / "plant.toml"
    cfg.write_text('site = "X"\n[shifts]\nearly = "6 o\'clock"\nlate = "14:00"\n')
    at = app(demo_journal, "views/fleet.py", config=str(cfg))
    assert not at.exception
    assert [e.value for e in at.error] == [
        f'Configuration problem: {cfg}: shifts.early: expected a local time HH:MM, got "6 o\'clock"'
    ]


def test_lone_station_that_never_calibrated(app: AppFactory, lone_journal: Path) -> None:
    at = app(lone_journal, "views/fleet.py")
    assert not at.exception
    assert " ".join(m.value for m in at.markdown).count("cycles in the last hour") == 1
    assert any(c.value == "Last calibration: never" for c in at.caption)
    at.switch_page("views/calibration.py").run()
    assert not at.exception
    assert any("never calibrated" in i.value for i in at.info)
    at.switch_page("views/gauge.py").run()
    assert not at.exception
    assert any("no passed calibrations" in i.value for i in at.info)
    for page in ("views/yields.py", "views/readings.py", "views/quality.py"):
        at.switch_page(page).run()
        assert not at.exception, page
        assert not at.error, page


def test_station_with_only_a_state_change(app: AppFactory, status_only_journal: Path) -> None:
    for page in PAGES:
        at = app(status_only_journal, page)
        assert not at.exception, page


def test_password_login_when_configured(app: AppFactory, demo_journal: Path) -> None:
    from argon2 import PasswordHasher
    from streamlit.testing.v1 import AppTest

    from tests.dashboard.conftest import APP

    at = AppTest.from_file(APP, default_timeout=60)
    at.secrets["leakfleet"] = {"password_hash": PasswordHasher().hash("s3cret")}
    app(demo_journal)  # sets the environment for the store
    at.run()
    assert not at.metric and [h.value for h in at.header] == ["leakfleet"]
    at.text_input(key="lf_password").input("wrong")
    at.button[0].click().run()
    assert [e.value for e in at.error] == ["Wrong password."]
    at.text_input(key="lf_password").input("s3cret")
    at.button[0].click().run()
    assert not at.exception
    assert " ".join(m.value for m in at.markdown).count("cycles in the last hour") == 6


def test_health_page_lists_every_station_and_quarantine(app: AppFactory, demo_journal: Path,
                                                        tmp_path: Path) -> None:
    import shutil

    from gateway.records import Rejected
    from gateway.store import open_journal

    db = tmp_path / "journal.db"
    shutil.copy(demo_journal, db)
    now = datetime.now(UTC)
    with open_journal(f"sqlite:///{db}") as j:
        j.write([Rejected(station=s, profile=f"{p}@1.0", raw=f"junk {i}", reason="noise",
                          received_at=now - timedelta(minutes=i))
                 for i, (s, p) in enumerate([("L1-S1", "lf-delim")] * 3 + [("L2-S1", "lf-kv")])])
    at = app(db, "views/health.py")
    assert not at.exception
    stations = _table(at, "Station", "Link", "Quarantined lines, 24 h")
    assert len(stations) == 6
    # quarantine per hour by station (a cable, a setting) or by profile (a format issue)
    at.radio(key="health_quarantine_by").set_value("profile").run()
    assert not at.exception
    specs = [json.loads(el.proto.spec) for el in at.get("vega_lite_chart")]
    assert any(sp.get("encoding", {}).get("color", {}).get("field") == "profile"
               for sp in specs), specs


def test_traces_page_overlays_curves_and_maps_the_backdown(
    app: AppFactory, demo_journal: Path, tmp_path: Path
) -> None:
    import shutil

    from gateway.cli import main

    db = tmp_path / "journal.db"
    shutil.copy(demo_journal, db)
    assert main(["sim", "study", "--station", "L1-S1", "--program", "HX-210",
                 "--store", f"sqlite:///{db}", "--masters", "10", "--standards", "4",
                 "--stabilise", "15", "--test", "15", "--interval", "0.2"]) == 0
    at = app(db, "views/traces.py")
    assert not at.exception, [e.message for e in at.exception]
    assert "Back-down map" in [h.value for h in at.subheader]
    assert any("Shortest cycle meeting" in s.value for s in at.success)


def test_legacy_unsalted_password_is_refused_with_how_to_fix(app: AppFactory,
                                                             demo_journal: Path) -> None:
    from streamlit.testing.v1 import AppTest

    from tests.dashboard.conftest import APP

    at = AppTest.from_file(APP, default_timeout=60)
    at.secrets["leakfleet"] = {"password_sha256": "00" * 32}
    app(demo_journal)
    at.run()
    assert not at.metric
    assert any("--hash-password" in e.value for e in at.error)


def test_wrong_passwords_pause_sign_in() -> None:
    """An attacker cycling browser sessions meets the same limit (it is process-wide)."""
    from argon2 import PasswordHasher

    from dashboard import auth

    good = PasswordHasher().hash("s3cret-pass")
    auth._failures.clear()
    for _ in range(auth.MAX_FAILURES):
        assert auth.password_ok("guess", good, now=100.0) is False
    assert auth.password_ok("s3cret-pass", good, now=101.0) is None  # paused, even if right
    assert auth.password_ok("s3cret-pass", good, now=100.0 + auth.WINDOW_S + 1) is True
    auth._failures.clear()


def test_a_rejects_curve_opens_from_a_link_beside_the_calibrations_curves(
    app: AppFactory, demo_journal: Path, tmp_path: Path
) -> None:
    """The fleet page links each test to ``traces?station=..&cycle=..``; that link opens the
    test's own curve, labelled with its verdict, beside the newest calibration's curves."""
    import shutil
    import sqlite3

    from gateway.records import PressureTrace
    from gateway.store import open_journal
    from gateway.store._sqlite import from_us

    db = tmp_path / "journal.db"
    shutil.copy(demo_journal, db)
    with sqlite3.connect(db) as c:
        rows = c.execute("SELECT cycle, ended_at, verdict, program FROM results WHERE station = "
                         "'L1-S1' AND verdict IN ('reject', 'pass') ORDER BY verdict DESC, "
                         "seq DESC LIMIT 400").fetchall()
    reject = next(r for r in rows if r[2] == "reject")
    passed = next(r for r in rows if r[2] == "pass")

    def curve(cycle: int, ended_us: int, program: str, role: str, drop: float) -> PressureTrace:
        end = from_us(ended_us)
        p = [350_000.0 * min(1.0, i / 20) for i in range(20)]
        p += [350_000.0 - drop * i for i in range(80)]
        return PressureTrace(station="L1-S1", line="L1", cycle=cycle, ended_at=end,
                             received_at=end, started_at=end, sample_interval_s=0.1,
                             pressures_pa=tuple(p), role=role, program=program,
                             phases=(("fill", 0.0), ("stabilise", 2.0), ("test", 5.0),
                                     ("dump", 9.9), ("end", 9.9)))

    with open_journal(f"sqlite:///{db}") as j:
        j.write([curve(reject[0], reject[1], reject[3], "result", 3.0),
                 curve(passed[0], passed[1], passed[3], "result", 0.2),
                 curve(passed[0], passed[1], passed[3], "master", 0.1),
                 curve(passed[0], passed[1], passed[3], "standard", 1.0)])
    at = app(db, "views/traces.py", query={"station": "L1-S1", "cycle": str(reject[0])})
    assert not at.exception, [e.message for e in at.exception]
    assert at.selectbox(key="traces_station").value == "L1-S1"
    assert at.radio(key="traces_show").value == "One test"
    assert at.selectbox(key="traces_one").value.startswith(f"cycle {reject[0]} · reject")
    assert any("newest calibration's master and master-plus-standard" in c.value
               for c in at.caption)
    at.radio(key="traces_show").set_value("Rejects only").run()
    assert not at.exception


def test_the_kiosk_view_shows_one_line_at_a_time_and_nothing_to_click(
    app: AppFactory, demo_journal: Path
) -> None:
    """``?kiosk=1`` on the fleet page: the sidebar hidden, one line's tiles, which line is
    shown and which come next, no station detail or alarm form."""
    at = app(demo_journal, query={"kiosk": "1", "every": "30"}, clock="data")
    assert not at.exception, [e.message for e in at.exception]
    headings = [h.value for h in at.subheader]
    assert [h for h in headings if h.startswith("Line ")] in (["Line L1"], ["Line L2"])
    assert "Station detail" not in headings
    assert any("Line 1 of 2" in c.value or "Line 2 of 2" in c.value for c in at.caption)
    assert any("display: none" in m.value for m in at.markdown)
    normal = app(demo_journal, clock="data")
    assert [h.value for h in normal.subheader if h.value.startswith("Line ")] == [
        "Line L1", "Line L2"]


def test_times_follow_the_zone_picked_in_the_sidebar_while_days_stay_the_plants(
    app: AppFactory, demo_journal: Path, tmp_path: Path
) -> None:
    import shutil
    import sqlite3
    from datetime import datetime, timedelta

    # "now" from the data, a day ahead of the wall clock: both runs below see the same
    # instant (on the wall clock, a rounding step could fall between them)
    db = tmp_path / "journal.db"
    shutil.copy(demo_journal, db)
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE results SET received_at = received_at + 86400000000 "
                     "WHERE seq = (SELECT MAX(seq) FROM results)")
    at = app(db, clock="data")
    assert at.selectbox(key="lf_timezone").value == "Europe/Berlin"  # the plant's by default
    plant = next(c.value for c in at.caption if c.value.startswith("As of "))
    assert "(Europe/Berlin)" in plant
    at.selectbox(key="lf_timezone").set_value("UTC").run()
    assert not at.exception, [e.message for e in at.exception]
    utc = next(c.value for c in at.caption if c.value.startswith("As of "))
    assert "(UTC)" in utc
    # the same instant, shown an hour apart (Berlin is UTC+1 in December), 24-hour clock
    shown = {z: datetime.strptime(t.split("As of ")[1][:19], "%Y-%m-%d %H:%M:%S")
             for z, t in (("Europe/Berlin", plant), ("UTC", utc))}
    assert shown["Europe/Berlin"] - shown["UTC"] == timedelta(hours=1)
