"""The fleet page's alarm list and maintenance log read and write the journal's logbook: an
acknowledgement on the dashboard is what `leakfleet alarms list` shows, and a seal change
entered there is in the maintenance log the alarm rules read (analytics tests show the
baseline restarting)."""

from __future__ import annotations

import shutil
from datetime import UTC, datetime
from pathlib import Path

from analytics.alarms import Condition, transitions
from gateway.alarm_eval import evaluate
from gateway.store import open_journal, open_store
from gateway.store.logbook import Logbook
from tests.dashboard.conftest import AppFactory


def _copy(src: Path, tmp_path: Path) -> Path:
    dst = tmp_path / "journal.db"
    shutil.copy(src, dst)
    return dst


def _evaluate(db: Path) -> None:
    url = f"sqlite:///{db}"
    store = open_store(url)
    try:
        with open_journal(url) as j:
            evaluate(j, store, datetime.now(UTC))
    finally:
        store.close()


def test_acknowledging_on_the_page_lands_in_the_journal(app: AppFactory, demo_journal: Path,
                                                         tmp_path: Path) -> None:
    db = _copy(demo_journal, tmp_path)
    _evaluate(db)  # the demo plant is healthy: nothing open ...
    with open_journal(f"sqlite:///{db}") as j:
        assert Logbook(j).open_alarms() == []
        # ... so a station starts rejecting in a row (as the gateway's evaluation would raise)
        streak = Condition("reject-streak:L1-S2", "reject-streak", "L1-S2", "alarm",
                           datetime.now(UTC), "4 rejects in a row")
        Logbook(j).apply(transitions([streak], []))
        opened = Logbook(j).open_alarms()
    at = app(db, "views/fleet.py")
    table = next(d.value for d in at.dataframe if "What" in d.value.columns)
    assert len(table) == len(opened)
    at.text_input(key="fleet_ack_by").input("Jo")
    at.selectbox(key="fleet_ack_id").set_value(opened[0].id)
    next(b for b in at.button if b.label == "Acknowledge").click().run()
    assert not at.exception
    with open_journal(f"sqlite:///{db}") as j:
        acked = {a.id: a.acked_by for a in Logbook(j).open_alarms()}
    assert acked[opened[0].id] == "Jo"


def test_a_seal_change_entered_on_the_page_is_logged(
    app: AppFactory, demo_journal: Path, tmp_path: Path
) -> None:
    db = _copy(demo_journal, tmp_path)
    at = app(db, "views/fleet.py")
    at.selectbox(key="fleet_station").set_value("L2-S1").run()
    at.selectbox(key="fleet_mt_kind").set_value("seal change")
    at.text_input(key="fleet_mt_by").input("Jo")
    next(b for b in at.button if b.label == "Record").click().run()
    assert not at.exception
    with open_journal(f"sqlite:///{db}") as j:
        events = Logbook(j).maintenance("L2-S1")
    assert [(e.what, e.by) for e in events] == [("seal change", "Jo")]
    at.run()
    table = next(d.value for d in at.dataframe if "What" in d.value.columns
                 and "By" in d.value.columns)
    assert list(table["What"]) == ["seal change"]
