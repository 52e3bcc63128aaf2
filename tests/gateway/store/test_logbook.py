"""The journal's logbook: maintenance events and alarm states (raise, acknowledge, clear)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from analytics.alarms import Condition, transitions
from gateway.cli import main
from gateway.records import MaintenanceEvent
from gateway.store import open_journal
from gateway.store.logbook import Logbook

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def _cond(key: str) -> Condition:
    return Condition(key, "reject-streak", "S1", "alarm", T0, f"{key} is true")


def test_maintenance_is_kept_once_and_listed_oldest_first(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        book = Logbook(j)
        late = MaintenanceEvent("S1", T0 + timedelta(hours=2), "note", "checked hoses", "Jo")
        seal = MaintenanceEvent("S1", T0, "seal change", "", "Jo")
        assert book.add_maintenance(late) and book.add_maintenance(seal)
        assert not book.add_maintenance(seal)  # the same event twice is one event
        assert [e.what for e in book.maintenance("S1")] == ["seal change", "note"]
        assert book.maintenance("S2") == []
        assert [e.restarts_baseline for e in book.maintenance()] == [True, False]


def test_maintenance_refuses_unknown_kinds_and_multi_line_notes() -> None:
    with pytest.raises(ValueError, match="maintenance kind"):
        MaintenanceEvent("S1", T0, "oil change")
    with pytest.raises(ValueError, match="one line"):
        MaintenanceEvent("S1", T0, "note", "two\nlines")


def test_an_alarm_is_raised_acknowledged_and_cleared_once(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        book = Logbook(j)
        assert book.apply(transitions([_cond("a"), _cond("b")], []), T0) == 2
        # evaluating again with the same conditions changes nothing
        opened = [a.key for a in book.open_alarms()]
        assert book.apply(transitions([_cond("a"), _cond("b")], opened), T0) == 0
        a = next(x for x in book.open_alarms() if x.key == "a")
        assert a.state == "active"
        assert book.acknowledge(a.id, "Jo", T0 + timedelta(minutes=1))
        assert not book.acknowledge(a.id, "Jo")  # already acknowledged
        a = next(x for x in book.open_alarms() if x.key == "a")
        assert (a.state, a.acked_by) == ("acknowledged", "Jo")
        # "a" stops being true: cleared; "b" stays open
        opened = [x.key for x in book.open_alarms()]
        book.apply(transitions([_cond("b")], opened), T0 + timedelta(minutes=5))
        assert [x.key for x in book.open_alarms()] == ["b"]
        history = book.alarms()
        assert {(x.key, x.state) for x in history} == {("a", "cleared"), ("b", "active")}
        # the same condition coming back later is a new occurrence
        book.apply(transitions([_cond("a"), _cond("b")], ["b"]), T0 + timedelta(hours=1))
        assert len([x for x in book.alarms() if x.key == "a"]) == 2
        with pytest.raises(ValueError, match="who acknowledges"):
            book.acknowledge(1, " ")


def test_cli_round_trip(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    url = f"sqlite:///{tmp_path / 'j.db'}"
    assert main(["maintenance", "--store", url, "add", "S1", "--kind", "seal change",
                 "--at", "2026-12-03T08:00", "--by", "Jo"]) == 0
    assert main(["maintenance", "--store", url, "list"]) == 0
    out = capsys.readouterr().out
    assert "S1  seal change by Jo" in out
    with open_journal(url) as j:
        Logbook(j).apply(transitions([_cond("a")], []), T0)
    assert main(["alarms", "--store", url, "list"]) == 0
    assert "a is true" in capsys.readouterr().out
    assert main(["alarms", "--store", url, "ack", "1", "--by", "Jo"]) == 0
    assert main(["alarms", "--store", url, "ack", "1", "--by", "Jo"]) != 0
    err = capsys.readouterr().err
    assert "not open and unacknowledged" in err and "Traceback" not in err


def test_alarms_watch_evaluates_until_stopped(tmp_path: Path) -> None:
    """The evaluator the gateway runs beside itself: raises a rejecting station's streak
    in the journal, and stops cleanly on SIGTERM."""
    import os
    import signal
    import subprocess
    import sys
    import time

    from gateway.records import TestResult

    url = f"sqlite:///{tmp_path / 'j.db'}"
    now = datetime.now(UTC)
    with open_journal(url) as j:
        j.write([TestResult(station="S1", line="L1", cycle=i, ended_at=now - timedelta(
            seconds=30 * (6 - i)), received_at=now, verdict="reject", program="P")
            for i in range(6)])
    repo = Path(__file__).resolve().parents[3]
    proc = subprocess.Popen([sys.executable, "-m", "gateway", "alarms", "--store", url, "watch",
                             "--interval", "1"], cwd=repo,
                            env={**os.environ, "PYTHONPATH": str(repo)},
                            stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        found: list[str] = []
        while time.monotonic() < deadline and not found:
            time.sleep(0.5)
            with open_journal(url) as j:
                found = [a.rule for a in Logbook(j).open_alarms()]
    finally:
        proc.send_signal(signal.SIGTERM)
        rc = proc.wait(timeout=30)
    assert "reject-streak" in found
    assert rc == 0 and "Traceback" not in (proc.stderr.read() if proc.stderr else "")
