"""Alarm events: every state change of the alarm table appends one forwardable record."""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from analytics.alarms import Condition, transitions
from gateway.errors import StoreError
from gateway.records import AlarmEvent, record_from_dict
from gateway.store import open_journal
from gateway.store.logbook import Logbook

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def _cond(key: str, station: str | None = "S1") -> Condition:
    return Condition(key, "reject-streak", station, "alarm", T0, f"{key} is true")


def test_raise_ack_clear_append_three_events_in_order(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        book = Logbook(j)
        book.apply(transitions([_cond("reject-streak:S1")], []), T0)
        (a,) = book.open_alarms()
        assert book.acknowledge(a.id, "Jo", T0 + timedelta(minutes=1))
        assert not book.acknowledge(a.id, "Jo")  # no second event for a refused change
        book.apply(transitions([], ["reject-streak:S1"]), T0 + timedelta(minutes=5))
        book.apply(transitions([], []), T0 + timedelta(minutes=6))  # nothing open: no event
        events = [e for _, e in j.read_after("alarm", 0, 10)]
        assert [e.change for e in events] == ["raised", "acknowledged", "cleared"]
        assert [e.state for e in events] == ["active", "acknowledged", "cleared"]
        assert [e.at for e in events] == [T0, T0 + timedelta(minutes=1), T0 + timedelta(minutes=5)]
        assert {e.alarm_id for e in events} == {a.id}
        assert events[1].by == "Jo" and events[0].by is None
        assert all(e.key == "reject-streak:S1" and e.station == "S1" for e in events)
        assert len({e.record_id for e in events}) == 3


def test_an_event_round_trips_through_json_and_checks_its_fields() -> None:
    e = AlarmEvent(7, "sink-backlog:mqtt", "sink-backlog", None, "warning", "sink mqtt: 40 "
                   "record(s) waiting", "raised", T0, T0 - timedelta(minutes=3))
    doc = e.to_dict()
    assert doc["kind"] == "alarm" and doc["station"] is None and doc["at"].startswith("2026")
    assert record_from_dict(doc) == e
    with pytest.raises(ValueError, match="change must be one of"):
        AlarmEvent(7, "k", "r", None, "warning", "m", "reopened", T0, T0)
    with pytest.raises(ValueError, match="by must be"):  # an acknowledgement names who
        AlarmEvent(7, "k", "r", None, "warning", "m", "acknowledged", T0, T0)


def test_state_and_event_are_one_transaction(tmp_path: Path) -> None:
    """When the event cannot be written, the state change does not happen either."""
    path = tmp_path / "j.db"
    with open_journal(f"sqlite:///{path}") as j:
        conn = sqlite3.connect(path)
        conn.execute("CREATE TRIGGER no_events BEFORE INSERT ON alarm_events "
                     "BEGIN SELECT RAISE(ABORT, 'disk says no'); END")
        conn.commit()
        conn.close()
        book = Logbook(j)
        with pytest.raises(StoreError, match="disk says no"):
            book.apply(transitions([_cond("a")], []), T0)
        assert book.open_alarms() == []
        assert j.read_after("alarm", 0, 10) == []


def test_events_are_a_journal_kind_with_cursor_backlog_and_pruning(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        book = Logbook(j)
        book.apply(transitions([_cond("a"), _cond("b", None)], []), T0)
        assert j.backlog("mqtt")["alarm"] == (2, T0)
        assert j.max_seq("alarm") == 2
        j.set_cursor("mqtt", "alarm", 1)
        # a sink that does not forward alarm events does not hold them back (per-kind lists)
        assert j.prune(T0 + timedelta(days=1), {"alarm": ["mqtt"]}) == 1
        assert [e.key for _, e in j.read_after("alarm", 0, 10)] == ["b"]
        assert j.backlog("mqtt")["alarm"] == (1, T0)


def test_a_sink_that_does_not_forward_alarm_events_has_no_backlog_of_them(
        tmp_path: Path) -> None:
    """The alarm rules judge a sink's backlog by the kinds it forwards: alarm events waiting
    for a Sparkplug sink (which never sends them) must not raise a backlog alarm (which would
    append more events, for ever)."""
    from gateway.alarm_eval import evaluate
    from gateway.cli.cmd_alarms import sink_kinds
    from gateway.store import open_store

    url = f"sqlite:///{tmp_path / 'j.db'}"
    with open_journal(url) as j:
        Logbook(j).apply(transitions([_cond("a")], []), T0)
        store = open_store(url)
        try:
            later = T0 + timedelta(hours=1)
            assert evaluate(j, store, later, sinks={"scada": ("result", "status")}) == 1
            assert all(a.rule != "sink-backlog" for a in Logbook(j).open_alarms())
            evaluate(j, store, later, sinks=["mqtt"])  # a sink that forwards every kind
            assert any(a.key == "sink-backlog:mqtt" for a in Logbook(j).open_alarms())
        finally:
            store.close()
    assert sink_kinds("mqtt,scada=result+status") == {"mqtt": (), "scada": ("result", "status")}
    with pytest.raises(ValueError, match="--sinks"):
        sink_kinds("scada=results")


def test_alarms_open_before_events_existed_get_theirs(tmp_path: Path) -> None:
    """A journal upgraded with alarms open: the evaluator appends their raised (and
    acknowledged) events once, so a subscriber's retained state shows them too."""
    path = tmp_path / "j.db"
    with open_journal(f"sqlite:///{path}") as j:
        book = Logbook(j)
        book.apply(transitions([_cond("a"), _cond("b")], []), T0)
        book.acknowledge(book.open_alarms()[0].id, "Jo", T0 + timedelta(minutes=1))
        book.apply(transitions([_cond("a")], ["a", "b"]), T0 + timedelta(minutes=2))
    conn = sqlite3.connect(path)
    conn.execute("DELETE FROM alarm_events")  # as an older release left it
    conn.commit()
    conn.close()
    with open_journal(f"sqlite:///{path}") as j:
        book = Logbook(j)
        assert book.backfill_events() == 1  # "b" is cleared: nothing to show for it
        assert book.backfill_events() == 0
        events = [e for _, e in j.read_after("alarm", 0, 10)]
        assert [(e.key, e.change, e.at) for e in events] == [
            ("a", "raised", T0), ("a", "acknowledged", T0 + timedelta(minutes=1))]
        assert events[1].by == "Jo"


def test_a_refused_fleet_wide_alarm_event_can_be_parked(tmp_path: Path) -> None:
    from gateway.store.deadletters import dead_letters, park

    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        Logbook(j).apply(transitions([_cond("sink-backlog:x", None)], []), T0)
        rows = j.read_after("alarm", 0, 10)
        park(j, "mqtt", "alarm", rows, "payload too large")
        (letter,) = dead_letters(j, "mqtt")
        assert (letter["station"], letter["record"]["station"]) == ("", None)
