"""``leakfleet dashboard`` refuses what would expose or strand it, in one line each."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.cli.cmd_dashboard import is_loopback, login_configured, streamlit_command

REPO = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize(("args", "message"), [
    (["--address", "999.1.1.1"], "--address '999.1.1.1'"),
    (["--address", "192.0.2.77"], "cannot listen there"),
    ([], "--store"),
])  # fmt: skip
def test_bad_addresses_are_one_line(args: list[str], message: str, tmp_path: Path,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    store = [] if args == [] else ["--store", f"sqlite:///{tmp_path / 'j.db'}"]
    code = main(["dashboard", *store, *args])
    err = capsys.readouterr().err
    assert code != 0 and message in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_non_loopback_needs_a_login(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("HOME", str(tmp_path))
    assert is_loopback("127.0.0.1") and is_loopback("localhost") and not is_loopback("0.0.0.0")
    assert not login_configured(tmp_path)
    code = main(["dashboard", "--store", f"sqlite:///{tmp_path / 'j.db'}", "--address",
                 "0.0.0.0"])
    err = capsys.readouterr().err
    assert code != 0 and "set up a login first" in err
    (tmp_path / ".streamlit").mkdir()
    (tmp_path / ".streamlit" / "secrets.toml").write_text(
        '[leakfleet]\npassword_hash = "$argon2id$v=19$m=65536,t=3,p=4$x$y"\n')
    assert login_configured(tmp_path)


def test_the_dashboard_process_gets_no_sink_secrets() -> None:
    env = {"LEAKFLEET_MQTT_PASSWORD": "m", "LEAKFLEET_INFLUX_TOKEN": "t", "PATH": "/bin"}
    _, sqlite_env = streamlit_command("sqlite:///x.db", port=8501, environ=env)
    assert "LEAKFLEET_MQTT_PASSWORD" not in sqlite_env
    assert "LEAKFLEET_INFLUX_TOKEN" not in sqlite_env
    _, influx_env = streamlit_command("influxdb2://h:8086?org=o&bucket=b", port=8501,
                                      environ=env)
    assert influx_env["LEAKFLEET_INFLUX_TOKEN"] == "t"  # it reads that store
    assert "LEAKFLEET_MQTT_PASSWORD" not in influx_env


def test_hash_password_prints_an_argon2id_hash(capsys: pytest.CaptureFixture[str],
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    import io

    from argon2 import PasswordHasher

    monkeypatch.setattr(sys, "stdin", io.StringIO("correct horse\n"))
    assert main(["dashboard", "--hash-password"]) == 0
    hashed = capsys.readouterr().out.strip()
    assert hashed.startswith("$argon2id$") and PasswordHasher().verify(hashed, "correct horse")


@pytest.mark.timeout(90)
def test_sigterm_stops_the_streamlit_child(tmp_path: Path) -> None:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    proc = subprocess.Popen(
        [sys.executable, "-m", "gateway", "dashboard", "--store",
         f"sqlite:///{tmp_path / 'j.db'}", "--port", str(port)],
        cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        env={**os.environ, "PYTHONPATH": str(REPO)},
    )  # fmt: skip
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                break
        time.sleep(0.3)
    else:
        proc.kill()
        pytest.fail("the dashboard did not listen")
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=30) == 0
    time.sleep(0.5)
    with socket.socket() as s:
        assert s.connect_ex(("127.0.0.1", port)) != 0  # nothing left serving the port


def test_clock_option_reaches_the_pages() -> None:
    from gateway.cli import build_parser

    args = build_parser().parse_args(["dashboard", "--store", "sqlite:///x.db", "--clock", "data"])
    assert args.clock == "data"
    _, env = streamlit_command("sqlite:///x.db", port=8501, clock=args.clock, environ={})
    assert env["LEAKFLEET_CLOCK"] == "data"
