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
