"""What a newcomer types wrong gets one line saying what to do, never a traceback."""

from __future__ import annotations

import socket
from pathlib import Path

import pytest

from gateway.cli import main


def _one_line(capsys: pytest.CaptureFixture[str]) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    return err


def test_demo_run_dir_that_is_a_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    f = tmp_path / "afile"
    f.write_text("x")
    assert main(["demo", "--run-dir", str(f), "--seconds", "1"]) != 0
    assert "a file is in the way" in _one_line(capsys)


def test_demo_store_must_be_sqlite(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["demo", "--run-dir", str(tmp_path), "--store",
                 "influxdb://127.0.0.1:8086/db"]) != 0
    assert "add InfluxDB as a sink with --influx" in _one_line(capsys)


def test_demo_port_in_use_mentions_free_ports(tmp_path: Path,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        s.listen()
        port = s.getsockname()[1]
        assert main(["demo", "--run-dir", str(tmp_path), "--port", str(port)]) != 0
    assert "--free-ports" in _one_line(capsys)


def test_negative_values_with_units_are_values(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["calc", "decay", "--volume", "120cc", "--leak", "5sccm", "--test-time", "10s",
                 "--pressure", "10psi", "--gas-temperature", "-5C"]) == 0
    assert "expected loss" in capsys.readouterr().out


def test_error_texts_use_words_and_sensible_digits(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["calc", "leak-rate", "--loss", "0.10psi", "--master-loss", "0.05psi",
                 "--standard-loss", "0.05psi", "--standard", "5sccm"]) != 0
    err = _one_line(capsys)
    assert "standard loss 344.74 Pa" in err and "_pa" not in err


def test_unknown_station_is_named_with_the_close_ones(tmp_path: Path,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    from datetime import UTC, datetime

    from gateway.records import TestResult
    from gateway.store import open_journal

    url = f"sqlite:///{tmp_path / 'j.db'}"
    with open_journal(url) as j:
        j.write([TestResult(station="L1-S1", line="L1", cycle=1, ended_at=datetime.now(UTC),
                            received_at=datetime.now(UTC), verdict="pass", program="P")])
    assert main(["report", "yield", "--store", url, "--station", "L1-S2"]) != 0
    err = _one_line(capsys)
    assert "no such station" in err and "did you mean L1-S1" in err


def test_sim_has_free_ports_and_stops(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["sim", "--free-ports", "--seconds", "0.5", "--run-dir", str(tmp_path)]) == 0
    assert "ready:" in capsys.readouterr().out
