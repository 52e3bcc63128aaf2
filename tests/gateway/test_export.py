"""``leakfleet export``: one row per record, canonical field names as columns, filters."""

from __future__ import annotations

import csv
import io
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

pytest.importorskip("gateway.store", reason="the journal (gateway.store) has not landed yet")

import pandas as pd

from gateway.cli import main
from gateway.cli.cmd_export import COLUMNS
from gateway.records import CalibrationEvent, Rejected, StationState, StationStatus, TestResult
from gateway.store import open_journal

pytestmark = pytest.mark.timeout(30)

T0 = datetime(2026, 12, 2, 6, 0, tzinfo=UTC)


def result(station: str, cycle: int, minutes: int) -> TestResult:
    return TestResult(
        station=station, line="L1", cycle=cycle, ended_at=T0 + timedelta(minutes=minutes),
        received_at=T0 + timedelta(minutes=minutes, seconds=1), program="HX-210",
        verdict="pass", test_pressure_pa=350_020.0, pressure_loss_pa=41.8, leak_rate_sccm=0.213,
        reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=8.0, test_s=10.0,
        part_id=f"HX210-{cycle:06d}", lower_limit_sccm=-1.0, temperature_c=22.41,
        raw=f"R;{cycle};...", profile="lf-delim@1.0",
    )


@pytest.fixture
def store(tmp_path: Path) -> str:
    url = f"sqlite:///{tmp_path / 'j.db'}"
    journal = open_journal(url)
    journal.write([
        result("L1-S1", 1, 0), result("L1-S1", 2, 1), result("L2-S1", 7, 2),
        CalibrationEvent(
            station="L1-S1", line="L1", ended_at=T0, received_at=T0, program="HX-210",
            master_loss_pa=38.6, standard_loss_pa=237.9, standard_sccm=3.0,
            standard_ref_pressure_pa=350_000.0, ratio=6.163, sensitivity=0.01506, passed=True,
        ),
        StationStatus("L1-S1", T0, StationState.ONLINE),
        Rejected("L1-S1", "lf-delim@1.0", "\\x93noise", "matches no line kind", T0, 3),
    ])
    journal.close()
    return url


def test_csv_to_stdout(store: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["export", "--store", store, "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert len(rows) == 3
    assert list(rows[0]) == list(COLUMNS["results"])  # canonical names, record order
    first = rows[0]
    assert first["station"] == "L1-S1" and first["cycle"] == "1"
    assert first["ended_at"] == "2026-12-02T06:00:00+00:00"
    assert float(first["leak_rate_sccm"]) == 0.213 and first["verdict"] == "pass"


def test_filters_station_and_time(store: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["export", "--store", store, "--station", "L1-S1",
                 "--since", "2026-12-02T06:00:30"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert [r["cycle"] for r in rows] == ["2"]


@pytest.mark.parametrize("kind", ["calibrations", "statuses", "quarantine"])
def test_other_kinds(store: str, kind: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["export", "--store", store, "--kind", kind]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert len(rows) == 1 and set(rows[0]) <= set(COLUMNS[kind])


def test_parquet_needs_out_and_round_trips(store: str, tmp_path: Path) -> None:
    assert main(["export", "--store", store, "--format", "parquet"]) == 2
    out = tmp_path / "r.parquet"
    assert main(["export", "--store", store, "--format", "parquet", "--out", str(out)]) == 0
    frame = pd.read_parquet(out)
    assert list(frame.columns) == list(COLUMNS["results"]) and len(frame) == 3
    assert str(frame["ended_at"].dt.tz) == "UTC"


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_out_refuses_links_folders_and_existing_files(
    store: str, tmp_path: Path, capsys: pytest.CaptureFixture[str], fmt: str
) -> None:
    victim = tmp_path / "precious.txt"
    victim.write_text("keep me")
    link = tmp_path / "link.out"
    link.symlink_to(victim)
    cases = [
        (link, "symbolic link"),
        (tmp_path, "is a directory"),
        (tmp_path / "missing" / "x.out", "no such directory"),
        (victim, "exists; add --force"),
    ]
    for out, message in cases:
        code = main(["export", "--store", store, "--format", fmt, "--out", str(out)])
        err = capsys.readouterr().err
        assert code != 0 and message in err and "Traceback" not in err, (out, err)
        assert len(err.strip().splitlines()) == 1
    assert victim.read_text() == "keep me"
    # --force overwrites a real file (and only the file: a link is still refused)
    assert main(["export", "--store", store, "--format", fmt, "--out", str(victim),
                 "--force"]) == 0
    assert victim.read_bytes() != b"keep me"
    assert main(["export", "--store", store, "--format", fmt, "--out", str(link),
                 "--force"]) != 0
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temp left over
