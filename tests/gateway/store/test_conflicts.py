"""A re-send of a stored key with other values is kept as a conflict; a true repeat is not."""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime, timedelta
from pathlib import Path

from analytics.alarms import AlarmRules
from gateway.alarm_eval import fleet_conditions
from gateway.records import CalibrationEvent, TestResult
from gateway.store import open_journal, open_store
from gateway.store.conflicts import conflicts

T0 = datetime.now(UTC) - timedelta(minutes=5)


def _result(**kw: object) -> TestResult:
    base = dict(station="S1", line="L1", cycle=7, ended_at=T0, received_at=T0, verdict="pass",
                program="P", leak_rate_sccm=0.5, raw="R;7;pass;0.5")
    base.update(kw)
    return TestResult(**base)  # type: ignore[arg-type]


def test_a_reject_replacing_a_pass_is_kept_beside_it(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'j.db'}"
    with open_journal(url) as j:
        assert j.write([_result()]).inserted == 1
        # a true repeat, received later with the same values: silent
        again = j.write([_result(received_at=T0 + timedelta(seconds=9))])
        assert (again.duplicates, again.conflicts) == (1, 0)
        # the same key, other values
        clash = j.write([_result(verdict="reject", leak_rate_sccm=3.2, raw="R;7;reject;3.2")])
        assert (clash.inserted, clash.duplicates, clash.conflicts) == (0, 0, 1)
        [c] = conflicts(j)
        assert c["station"] == "S1" and "verdict 'pass' -> 'reject'" in c["reason"]
        assert c["stored_raw"] == "R;7;pass;0.5" and c["new_raw"] == "R;7;reject;3.2"
        # offered again, the same conflict is not stored twice
        assert j.write([_result(verdict="reject", leak_rate_sccm=3.2,
                                raw="R;7;reject;3.2")]).conflicts == 0
        assert [r for (r,) in j._query("SELECT verdict FROM results", (), "")] == ["pass"]
        cal = CalibrationEvent(station="S1", line="L1", ended_at=T0, received_at=T0,
                               program="P", master_loss_pa=3.0, standard_loss_pa=200.0)
        j.write([cal])
        assert j.write([replace(cal, standard_loss_pa=150.0)]).conflicts == 1
    store = open_store(url)
    try:
        found = fleet_conditions(store, datetime.now(UTC), maintenance={}, rules=AlarmRules())
    finally:
        store.close()
    assert any(c.rule == "conflict" for c in found["S1"])  # on the alarm list
