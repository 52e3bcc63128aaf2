"""`leakfleet report shift` on a hand-built journal: exact counts, flags, errors, the HTML file.

The journal (see ``shift_journal``) is written through the store's own writer and read back
through ``--store sqlite:///…``; every expected number is counted by hand from its table.
"""

from __future__ import annotations

import json
import re
from datetime import date
from pathlib import Path

import pytest
from shift_journal import EXPECTED_NIGHT_L1, write_journal

from analytics.audit import LeakStandard, standards_due
from gateway.cli import main

pytest.importorskip("gateway.store", reason="the store package is not part of this build")
pytestmark = pytest.mark.timeout(60)

BERLIN = ["--timezone", "Europe/Berlin"]


@pytest.fixture(scope="module")
def journal(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path]:
    directory = tmp_path_factory.mktemp("shift")
    return write_journal(directory), directory / "standards.csv"


def _shift(
    journal: tuple[str, Path], capsys: pytest.CaptureFixture[str], *argv: str
) -> dict:  # type: ignore[type-arg]
    url, standards = journal
    code = main(["report", "shift", "--store", url, "--standards", str(standards), *BERLIN,
                 "--json", *argv])  # fmt: skip
    out = capsys.readouterr().out
    assert code == 0
    return json.loads(out)  # type: ignore[no-any-return]


def _line(doc: dict, name: str) -> dict:  # type: ignore[type-arg]
    return next(sec for sec in doc["result"]["lines"] if sec["line"] == name)


def test_night_shift_counts_are_exact(
    journal: tuple[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    doc = _shift(journal, capsys, "--date", "2026-01-14", "--shift", "night")
    r = doc["result"]
    assert (r["start"], r["end"]) == ("2026-01-14T21:00:00+00:00", "2026-01-15T05:00:00+00:00")
    assert [sec["line"] for sec in r["lines"]] == ["L1", "L2"]
    l1 = _line(doc, "L1")
    assert {k: l1[k] for k in EXPECTED_NIGHT_L1} == pytest.approx(EXPECTED_NIGHT_L1)
    # Parts by the station of their first test: S1 has P2 P3 P6 and both id-less tests.
    by_station = {row["group"]["station"]: row for row in l1["by_station"]}
    assert (by_station["L1-S1"]["parts"], by_station["L1-S2"]["parts"]) == (5, 2)
    # Rejects in the shift: P4 ×2 and P2 above the limit, P2 gross, the id-less part unseated.
    assert [(row["category"], row["n"]) for row in l1["rejects"]["rows"]] == [
        ("leak above limit", 3), ("gross leak", 1), ("no part seated", 1)
    ]  # fmt: skip
    # Passes in the night: P1 (retested on another station, from the late shift), P2 (after a
    # reject and a gross, across midnight), P3, P5, P6 (the aborted test is not a reject).
    rt = l1["retests"]
    assert (rt["passes"], rt["passed_after_retest"]) == (5, 2)
    assert rt["share"] == pytest.approx(2 / 5)
    assert rt["after_two_or_more_rejects"] == ["P2"]
    assert rt["marginal"] == ["P1"]  # 1.9 sccm within 10 % below the 2 sccm limit
    assert [(p["part_id"], p["station"], p["rejects_before"]) for p in rt["parts"]] == [
        ("P1", "L1-S2", 1), ("P2", "L1-S1", 2)
    ]  # fmt: skip
    assert not _line(doc, "L2")["has_data"] and _line(doc, "L2")["tests"] == 0


def test_late_shift_keeps_the_part_retested_after_it(
    journal: tuple[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    doc = _shift(journal, capsys, "--date", "2026-01-14", "--shift", "late")
    l1 = _line(doc, "L1")
    # P7 passed; P1 was rejected and was still rejected when the late shift ended.
    assert (l1["tests"], l1["parts"], l1["first_pass"], l1["final_pass"]) == (2, 2, 1, 1)
    assert (l1["retests"]["passes"], l1["retests"]["passed_after_retest"]) == (1, 0)
    l2 = _line(doc, "L2")
    assert (l2["tests"], l2["parts"], l2["first_pass_yield"]) == (1, 1, 1.0)


def test_calibration_state_alarms_and_standards(
    journal: tuple[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    doc = _shift(journal, capsys, "--date", "2026-01-14", "--shift", "night")
    l1 = _line(doc, "L1")
    stations = {s["station"]: s for s in l1["stations"]}
    s1, s2 = stations["L1-S1"], stations["L1-S2"]
    # L1-S1 calibrated at 00:00 local on the 15th with LS-101, valid up to and including the
    # 14th: the calibration is flagged.
    assert s1["calibration_state"] == "overdue standard" and s1["standard_overdue"] is True
    assert s1["standard_serial"] == "LS-101" and s1["state_at_end"] == "online"
    assert s1["last_calibration_at"] == "2026-01-14T23:00:00+00:00"
    assert (s2["calibration_state"], s2["calibrations_in_shift"]) == ("failed", 1)
    assert s2["failed_calibrations_in_shift"] == 1 and s2["state_at_end"] == "online"
    kinds = sorted((a["station"], a["source"], a["kind"]) for a in l1["alarms"])
    assert kinds == [
        ("L1-S1", "standard", "overdue standard"),
        ("L1-S2", "calibration", "failed"),
        ("L1-S2", "status", "fault"),
    ]
    assert _line(doc, "L2")["stations"][0]["calibration_state"] == "no calibration"
    # Standards judged on the local date the shift ends (the 15th).
    assert doc["result"]["standards_judged_on"] == "2026-01-15"
    status = {s["serial"]: (s["status"], s["days_left"]) for s in l1["standards"]}
    assert status == {"LS-101": ("overdue", -1), "LS-102": ("due soon", 13)}
    assert [s["serial"] for s in doc["result"]["other_standards"]] == ["LS-900"]


def test_standard_due_dates_across_leap_days() -> None:
    # Gregorian calendar: 2028 is a leap year (divisible by 4, not a century), 2029 is not.
    leap = LeakStandard("LS-L", "S1", 5.0, 50_000.0, date(2028, 2, 29), interval_months=12)
    before = LeakStandard("LS-B", "S2", 5.0, 50_000.0, date(2027, 2, 28), interval_months=12)
    assert leap.due == date(2029, 2, 28) and before.due == date(2028, 2, 28)
    on = {s.serial: s for s in standards_due([leap, before], date(2028, 2, 27), within_days=1)}
    assert on["LS-B"].days_left == 1 and on["LS-B"].status == "due soon"
    # 27 Feb → 1 Mar 2029 is 2 days (no 29th); across 29 Feb 2028 it is 3.
    late = {s.serial: s for s in standards_due([leap], date(2029, 3, 1))}
    assert late["LS-L"].days_left == -1 and late["LS-L"].status == "overdue"
    across = LeakStandard("LS-X", "S3", 5.0, 50_000.0, date(2027, 3, 1), due_date=date(2028, 3, 1))
    assert standards_due([across], date(2028, 2, 27))[0].days_left == 3


def test_no_data_still_writes_a_report(
    journal: tuple[str, Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    url, _ = journal
    page = tmp_path / "empty.html"
    code = main(["report", "shift", "--store", url, *BERLIN, "--date", "2026-01-20",
                 "--shift", "early", "--html", str(page), "--json"])  # fmt: skip
    captured = capsys.readouterr()
    assert code == 0
    doc = json.loads(captured.out)
    assert doc["result"]["has_data"] is False and doc["result"]["tests"] == 0
    assert "no test results in the early shift of 2026-01-20" in captured.err
    html = page.read_text()
    assert "no test results in the early shift of 2026-01-20" in html
    assert all(not sec["has_data"] for sec in doc["result"]["lines"])


@pytest.mark.parametrize(
    ("argv", "expected"),
    [
        (["--date", "2026-01-14", "--shift", "evening"],
         "--shift: unknown shift 'evening'; the calendar has early, late, night"),
        (["--date", "2026-13-01", "--shift", "early"], "--date: expected a date YYYY-MM-DD"),
        (["--date", "14.01.2026", "--shift", "early"], "--date: expected a date YYYY-MM-DD"),
        (["--date", "2026-01-14", "--shift", "early", "--shifts", "early=6-14"],
         "--shifts: expected NAME=HH:MM-HH:MM"),
        (["--date", "2026-01-14", "--shift", "early", "--timezone", "Mars/Olympus"],
         "unknown time zone 'Mars/Olympus'"),
    ],
)  # fmt: skip
def test_user_mistakes_are_one_line(
    journal: tuple[str, Path], capsys: pytest.CaptureFixture[str], argv: list[str], expected: str
) -> None:
    url, _ = journal
    code = main(["report", "shift", "--store", url, *argv])
    err = capsys.readouterr().err
    assert code == 2 and expected in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_html_is_self_contained_and_printable(
    journal: tuple[str, Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    url, standards = journal
    for paper, size in (("a4", "A4"), ("letter", "letter")):
        page = tmp_path / f"night-{paper}.html"
        assert main(["report", "shift", "--store", url, "--standards", str(standards), *BERLIN,
                     "--date", "2026-01-14", "--shift", "night", "--html", str(page),
                     "--paper", paper]) == 0  # fmt: skip
        html = page.read_text()
        assert f"@page{{size:{size} portrait" in html
    capsys.readouterr()
    # Nothing that could fetch: no scripts, links, images, imports or remote URLs.
    assert not re.search(r"<script|<link|<img|<iframe|@import|url\(|@font-face", html, re.I)
    assert not re.search(r"(src|href)\s*=", html, re.I)
    assert not re.search(r"https?://(?!www\.w3\.org/2000/svg)", html)
    assert html.count('<section class="line page"') == 2
    assert "break-after:page" in html and "Comments, handover notes" in html


def _config(directory: Path, url: str, extra: str = "") -> Path:
    """A gateway config for the hand-built plant: zone, shifts and the standards register."""
    standards = "".join(
        f'[[standards]]\nserial = "{serial}"\nstation = "{station}"\nnominal = "{flow} sccm"\n'
        f'reference_pressure = "50 kPa"\ncertificate_date = {cert}\n{due}\n'
        + (f"uncertainty_pct = {unc}\n" if unc else "")
        for serial, station, flow, cert, due, unc in (
            ("LS-101", "L1-S1", 5, "2025-01-14", "due_date = 2026-01-14", 2),
            ("LS-102", "L1-S2", 5, "2025-02-28", "interval_months = 11", 2),
            ("LS-201", "L2-S1", 5, "2025-06-01", "due_date = 2026-06-01", 2),
            ("LS-900", "OLD-S9", 5, "2024-01-01", "due_date = 2025-01-01", None),
        )
    )
    stations = "".join(
        f'[[stations]]\nid = "{sid}"\nline = "{sid[:2]}"\nprofile = "lf-delim"\n'
        f'endpoint = "tcp://127.0.0.1:{port}"\n'
        for sid, port in (("L1-S1", 15901), ("L1-S2", 15902), ("L2-S1", 15903))
    )
    path = directory / "plant.toml"
    path.write_text(
        f'site = "Northmere Works"\ntimezone = "Europe/Berlin"\nstore = "{url}"\n{extra}'
        '[shifts]\nearly = "06:00"\nlate = "14:00"\nnight = "22:00"\n'
        f"{standards}{stations}"
    )
    return path


def test_config_gives_zone_shifts_register_and_store(
    journal: tuple[str, Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    url, _ = journal
    config = _config(tmp_path, url)
    night = ["--date", "2026-01-14", "--shift", "night", "--json"]
    assert main(["report", "shift", "--config", str(config), *night]) == 0
    from_config = json.loads(capsys.readouterr().out)
    from_options = _shift(journal, capsys, *night[:-1])
    # the same figures; the config also names the site for the page's header
    assert from_config["result"].pop("site") == "Northmere Works"
    assert from_options["result"].pop("site") == ""
    assert from_config["result"] == from_options["result"]
    assert from_config["filters"]["config"] == str(config)
    # Options override the config: the same shift name on the UTC clock is another window.
    assert main(["report", "shift", "--config", str(config), "--timezone", "UTC", *night]) == 0
    assert json.loads(capsys.readouterr().out)["result"]["start"] == "2026-01-14T22:00:00+00:00"
    assert main(["report", "standards", "--config", str(config), "--today", "2026-01-15",
                 "--json"]) == 0  # fmt: skip
    doc = json.loads(capsys.readouterr().out)["result"]
    assert {s["serial"]: s["status"] for s in doc["standards"]}["LS-101"] == "overdue"
    # L1-S1 calibrated at 00:00 Berlin on the 15th: the config's zone makes that the 15th.
    assert [o["standard"] for o in doc["overdue_calibrations"]] == ["LS-101"]


def test_demo_config_has_a_standard_near_its_due_date(capsys: pytest.CaptureFixture[str]) -> None:
    argv = ["report", "standards", "--config", "demo", "--no-store", "--today", "2026-12-02",
            "--json"]  # fmt: skip
    assert main(argv) == 0
    status = json.loads(capsys.readouterr().out)["result"]["standards"]
    assert [s["serial"] for s in status if s["status"] != "ok"] == ["LS-3022"]
    assert status[0]["serial"] == "LS-3022" and status[0]["days_left"] == 19


@pytest.mark.parametrize(
    ("extra", "expected"),
    [
        ('[[standards]]\nserial = "LS-7"\nstation = "L1-S1"\nnominal = "5 sccm"\n'
         'reference_pressure = "50 kPa"\ninterval_months = 12\n',
         "plant.toml: standards[LS-7].certificate_date: expected a date"),
        ('[[standards]]\nserial = "LS-8"\nstation = "L1-S1"\nnominal = "5 furlongs"\n'
         'reference_pressure = "50 kPa"\ncertificate_date = 2025-01-01\ninterval_months = 12\n',
         "plant.toml: standards[LS-8].nominal:"),
    ],
)  # fmt: skip
def test_bad_register_in_config_is_one_line(
    journal: tuple[str, Path], tmp_path: Path, capsys: pytest.CaptureFixture[str],
    extra: str, expected: str,
) -> None:  # fmt: skip
    url, _ = journal
    config = _config(tmp_path, url)
    config.write_text(config.read_text() + extra)
    code = main(["report", "shift", "--config", str(config), "--date", "2026-01-14",
                 "--shift", "night"])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2 and expected in err and len(err.strip().splitlines()) == 1


def test_bad_shift_in_config_is_one_line(
    journal: tuple[str, Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    url, _ = journal
    config = _config(tmp_path, url)
    config.write_text(config.read_text().replace('early = "06:00"', 'early = "6am"'))
    code = main(["report", "shift", "--config", str(config), "--date", "2026-01-14",
                 "--shift", "night"])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2 and "plant.toml: shifts.early: expected a start time" in err
