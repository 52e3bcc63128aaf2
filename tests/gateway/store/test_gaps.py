"""Lost cycles on record: reported by a reader, or skipped numbers seen by the journal."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path

from gateway.records import GapEvent, TestResult
from gateway.store import open_journal
from gateway.store.gaps import gaps

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def _r(cycle: int, station: str = "S1") -> TestResult:
    return TestResult(station=station, line="L1", cycle=cycle, received_at=T0, verdict="pass",
                      ended_at=T0 + timedelta(seconds=cycle), program="P")


def test_skipped_cycle_numbers_are_recorded_once(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        j.write([_r(40), _r(41)])
        stats = j.write([_r(44), _r(45)])  # 42 and 43 never arrived
        assert stats.gaps == 1 and stats.inserted == 2
        [g] = gaps(j)
        assert (g.station, g.first, g.last, g.source) == ("S1", 42, 43, "sequence")
        j.write([_r(44)])  # a repeat changes nothing
        j.write([_r(1)])  # the station was reset: not a gap
        j.write([_r(2), _r(3)])
        assert len(gaps(j)) == 1
        j.write([_r(7, "S2"), _r(9, "S2")])  # within one batch too
        assert [(g.first, g.last) for g in gaps(j, "S2")] == [(8, 8)]


def test_a_gap_a_reader_reported_is_not_recorded_twice(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        j.write([_r(10)])
        ring = GapEvent(station="S1", at=T0, first=11, last=20, source="ring",
                        detail="overwritten in the station's ring")
        stats = j.write([ring, _r(21)])
        assert stats.gaps == 1
        assert [(g.first, g.last, g.source) for g in gaps(j)] == [(11, 20, "ring")]
