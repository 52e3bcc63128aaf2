"""Limits in force over a station's history, as steps."""

from __future__ import annotations

import pandas as pd

from analytics.station import LIMIT_KINDS, limit_segments, limits_of


def _results(limits: list[float | None], lower: list[float | None] | None = None
             ) -> pd.DataFrame:
    times = pd.date_range("2026-12-01T06:00Z", periods=len(limits), freq="h")
    frame = pd.DataFrame({"ended_at": times, "reject_limit_sccm": limits})
    if lower is not None:
        frame["lower_limit_sccm"] = lower
    return frame.iloc[::-1]  # newest first, as the page reads them


def test_a_limit_change_starts_a_new_step() -> None:
    steps = limit_segments(_results([2.0, 2.0, 2.5, 2.5, 2.5]), "reject_limit_sccm")
    assert steps["value"].tolist() == [2.0, 2.5]
    assert steps["tests"].tolist() == [2, 3]
    # the first step lasts until the first test judged against the new limit
    assert steps["end"].iloc[0] == steps["start"].iloc[1]
    assert str(steps["start"].iloc[1]) == "2026-12-01 08:00:00+00:00"


def test_tests_without_a_limit_leave_a_hole() -> None:
    steps = limit_segments(_results([2.0, None, None, 2.0]), "reject_limit_sccm",
                           until=pd.Timestamp("2026-12-01T12:00Z"))
    assert steps["value"].tolist() == [2.0, 2.0]
    assert str(steps["end"].iloc[0]) == "2026-12-01 07:00:00+00:00"
    assert str(steps["end"].iloc[1]) == "2026-12-01 12:00:00+00:00"


def test_lower_limit_is_named_apart_from_the_reject_limit() -> None:
    both = limits_of(_results([2.0, 2.0], lower=[-1.0, -1.0]))
    assert set(both["what"]) == {"reject limit", LIMIT_KINDS["lower_limit_sccm"]}
    assert "not a reject limit" in LIMIT_KINDS["lower_limit_sccm"]
    assert limits_of(pd.DataFrame()).empty
