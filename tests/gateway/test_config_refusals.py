"""Config values that would fail later (or forge log lines) are refused by --check, each in one
line naming file and key."""

from __future__ import annotations

from pathlib import Path

import pytest

from gateway.cli import main

DEMO = (Path(__file__).resolve().parents[2] / "gateway" / "configs" / "demo.toml").read_text()


@pytest.mark.parametrize(("old", "new", "key"), [
    ('timeout = "1 s"', 'timeout = "1e-300 s"', "stations[L1-S2].timeout"),
    ("overrides = { device_id = 7 }", "overrides = { device_id = 99999 }", "device_id"),
    ("overrides = { device_id = 7 }", "overrides = { device_id = -5 }", "device_id"),
    ("overrides = { device_id = 7 }", "overrides = { baudrate = -1 }", "baudrate"),
    ('id = "L1-S1"', 'id = "L1-S1\\nFAKE line"', "stations[0].id"),
    ('early = "06:00"', 'early = "25:00"', "shifts.early"),
    ('endpoint = "tcp://127.0.0.1:15101"', 'endpoint = "tcp:/127.0.0.1:4001"', "endpoint"),
    ('endpoint = "tcp://127.0.0.1:15101"', 'endpoint = "127.0.0.1:4001"', "endpoint"),
    ('endpoint = "tcp://127.0.0.1:15101"', 'endpoint = "htp:/x"', "endpoint"),
    ('programs = { 1 = "MV-44" }', 'programs = { "²" = "MV-44" }', "programs.²"),
    ('calibration_interval = "8 h"', 'calibration_interval = "8 parsecs"',
     "alarms.calibration_interval"),
    ('calibration_interval = "8 h"', 'calibration_interval = "2 s"', "alarms.calibration_interval"),
    ('calibration_interval = "8 h"', 'reject_rate = 1.5', "alarms.reject_rate"),
    ('calibration_interval = "8 h"', 'reject_streak = 1', "alarms.reject_streak"),
    ('calibration_interval = "8 h"', 'silent_after = "5 min"', "alarms.silent_after"),
])  # fmt: skip
def test_check_refuses(old: str, new: str, key: str, tmp_path: Path,
                       capsys: pytest.CaptureFixture[str]) -> None:
    assert old in DEMO
    cfg = tmp_path / "plant.toml"
    cfg.write_text(DEMO.replace(old, new, 1))
    code = main(["gateway", "--config", str(cfg), "--check"])
    err = capsys.readouterr().err
    assert code != 0 and key in err and "Traceback" not in err, err
    assert len(err.strip().splitlines()) == 1  # no forged second line


def test_a_store_that_is_not_sqlite_and_a_missing_token(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    other = tmp_path / "notes.db"
    other.write_text("not a journal")
    assert main(["gateway", "--config", "demo", "--store", f"sqlite:///{other}",
                 "--check"]) != 0
    assert "SQLite journal" in capsys.readouterr().err
    monkeypatch.delenv("LEAKFLEET_INFLUX_TOKEN", raising=False)
    assert main(["gateway", "--config", "demo", "--store", f"sqlite:///{tmp_path / 'j.db'}",
                 "--influx", "influxdb2://127.0.0.1:8086?org=x&bucket=y", "--check"]) != 0
    err = capsys.readouterr().err
    assert "needs a token" in err and "Traceback" not in err
