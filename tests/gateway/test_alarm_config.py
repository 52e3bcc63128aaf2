"""The config's [alarms] thresholds and leak-standard register reach the alarm rules: the
gateway's evaluation (``leakfleet alarms --config``) and the dashboard's tiles read them alike."""

from __future__ import annotations

import json
import subprocess
import sys
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

from analytics import LeakStandard
from analytics.alarms import standard_conditions
from analytics.audit import standards_due
from gateway.alarm_eval import rules_from
from gateway.config import load_config, parse_alarms

REPO = Path(__file__).resolve().parents[2]


def test_alarm_thresholds_from_the_config_over_the_defaults() -> None:
    rules = rules_from(parse_alarms({"calibration_interval": "8 h", "reject_streak": 4,
                                     "gap_window": "30 min"}, "plant.toml"))  # fmt: skip
    assert rules.calibration_interval == timedelta(hours=8)
    assert rules.reject_streak == 4 and rules.gap_window == timedelta(minutes=30)
    assert rules.silent_min == timedelta(minutes=5)  # untouched default
    assert load_config("demo").alarms == {"calibration_interval": 8 * 3600.0}


def test_a_standard_due_soon_warns_and_one_past_its_date_alarms() -> None:
    # certificate 2025-12-21 + 12 months: due 2026-12-21, valid on that day and overdue from
    # the next (calendar arithmetic; recertification practice: common practice)
    ls = LeakStandard("LS-9", "L1-S2", 3.0, 350_000.0, date(2025, 12, 21), interval_months=12)
    now = datetime(2026, 12, 4, 9, 0, tzinfo=UTC)
    soon = standard_conditions(standards_due([ls], date(2026, 12, 4), 30), now)
    assert [(c.key, c.severity, c.station) for c in soon] == [
        ("standard:LS-9", "warning", "L1-S2")]
    assert "in 17 d" in soon[0].message and "2026-12-21" in soon[0].message
    assert not standard_conditions(standards_due([ls], date(2026, 11, 20), 30), now)
    assert standard_conditions(standards_due([ls], date(2026, 12, 21), 30), now)[0].severity \
        == "warning"
    late = standard_conditions(standards_due([ls], date(2026, 12, 22), 30), now)
    assert late[0].severity == "alarm" and "overdue" in late[0].message


def test_alarms_evaluate_with_the_config_raises_the_standard_due(tmp_path: Path) -> None:
    """The demo's register holds LS-3022, due 2026-12-21: from 30 days before that date it is
    on the journal's alarm list (a warning, then an alarm once past)."""
    store = f"sqlite:///{tmp_path / 'j.db'}"

    def cli(*args: str) -> str:
        return subprocess.run([sys.executable, "-m", "gateway", "alarms", "--config", "demo",
                               "--store", store, *args], cwd=REPO, capture_output=True,
                              text=True, timeout=60, check=True).stdout  # fmt: skip

    cli("evaluate")
    listed = [json.loads(x) for x in cli("list", "--json").splitlines()]
    if datetime.now(UTC).date() >= date(2026, 11, 21):
        assert any(a["rule"] == "standard-due" and "LS-3022" in a["message"]
                   and a["station"] == "L1-S2" for a in listed), listed
