"""The shipped deploy files stay valid: the example config passes the gateway's own check,
and the systemd units keep their safety settings."""

from __future__ import annotations

import configparser
from pathlib import Path

import pytest

from gateway.cli import main

DEPLOY = Path(__file__).resolve().parents[3] / "deploy"


def test_example_gateway_config_checks(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["gateway", "--config", str(DEPLOY / "gateway.toml"), "--check"]) == 0
    out = capsys.readouterr().out
    assert "sink mqtt" in out and "sink influx" in out


def test_units_run_unprivileged_and_restart() -> None:
    for name in ("leakfleet-gateway.service", "leakfleet-dashboard.service"):
        unit = configparser.ConfigParser(strict=False, interpolation=None)
        unit.optionxform = str  # type: ignore[assignment,method-assign]
        unit.read(DEPLOY / "systemd" / name)
        service = unit["Service"]
        assert service["User"] == "leakfleet"
        assert service["Restart"] == "on-failure"
        assert service["StateDirectory"] == "leakfleet"
        assert service["NoNewPrivileges"] == "yes" and service["ProtectSystem"] == "strict"


def test_no_secret_in_example_config() -> None:
    text = (DEPLOY / "gateway.toml").read_text()
    assert "password =" not in text and "token =" not in text
