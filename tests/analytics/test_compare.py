"""Manager comparisons: periods, volume weighting, shifts, weeks, targets, the yield axis."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.weightstats import DescrStatsW

from analytics.compare import (
    against_target,
    by_period,
    families,
    family_programs,
    good_total,
    shift_against_shift,
    summarise,
    week_over_week,
    weighted_yield,
    yield_axis,
)
from analytics.shifts import ShiftCalendar

BERLIN = ShiftCalendar("Europe/Berlin")


def _hours(rows: list[tuple[datetime, int, int]]) -> pd.DataFrame:
    return pd.DataFrame({"bucket": pd.to_datetime([r[0] for r in rows], utc=True),
                         "good": [r[1] for r in rows], "total": [r[2] for r in rows]})


def test_good_total_from_verdict_and_first_pass_counts() -> None:
    vc = pd.DataFrame({"bucket": ["h1"] * 4, "verdict": ["pass", "reject", "gross", "aborted"],
                       "n": [90, 6, 1, 3]})
    out = good_total(vc, "test").iloc[0]
    assert (out["good"], out["total"]) == (90, 97)  # aborted tests carry no verdict on the part
    fp = pd.DataFrame({"bucket": ["h1", "h2"], "parts": [50, 40], "first_pass": [48, 39],
                       "final_pass": [50, 40]})
    both = good_total(fp, "first_pass", keys=())
    assert both.iloc[0].tolist() == [87, 90]
    with pytest.raises(ValueError, match="missing column"):
        good_total(vc.drop(columns="n"), "test")


def test_days_are_the_plants_local_days() -> None:
    # 22:30 UTC on 1 December is 23:30 CET (1 Dec); 23:30 UTC is 00:30 CET on 2 December
    # (CET = UTC+1 in winter: IANA tz database, Europe/Berlin)
    counts = _hours([(datetime(2026, 12, 1, 22, 0, tzinfo=UTC), 9, 10),
                     (datetime(2026, 12, 1, 23, 0, tzinfo=UTC), 1, 2)])
    days = by_period(counts, BERLIN, "day")
    assert days["period"].tolist() == ["2026-12-01", "2026-12-02"]
    assert days["yield"].tolist() == [0.9, 0.5]
    assert days["share"].tolist() == pytest.approx([10 / 12, 2 / 12])


def test_iso_weeks_follow_iso_8601() -> None:
    # ISO 8601: week 1 holds the year's first Thursday; 2026 starts on a Thursday, so it has
    # 53 weeks and Friday 1 January 2027 still lies in 2026-W53 (Monday 28 December 2026)
    counts = _hours([(datetime(2026, 12, 31, 12, tzinfo=UTC), 5, 5),
                     (datetime(2027, 1, 1, 12, tzinfo=UTC), 5, 10),
                     (datetime(2027, 1, 4, 12, tzinfo=UTC), 8, 10)])
    weeks = week_over_week(by_period(counts, BERLIN, "week"))
    assert weeks["period"].tolist() == ["2026-W53", "2027-W01"]
    assert weeks["day"].tolist() == ["2026-12-28", "2027-01-04"]
    assert weeks["yield"].tolist() == pytest.approx([10 / 15, 0.8])
    assert np.isnan(weeks["change_pp"].iloc[0])
    assert weeks["change_pp"].iloc[1] == pytest.approx((0.8 - 10 / 15) * 100)


def test_pooled_yield_is_the_volume_weighted_mean() -> None:
    # a week of 1 000 parts a day at about 99 % and a Sunday of 10 parts at 50 %
    start = datetime(2026, 11, 30, 12, tzinfo=UTC)  # a Monday
    rows = [(start + timedelta(days=d), 990 - d, 1000) for d in range(6)]
    rows.append((start + timedelta(days=6), 5, 10))
    days = by_period(_hours(rows), BERLIN, "day")
    s = summarise(days)
    # reference: numpy.average with weights and statsmodels' DescrStatsW weighted mean
    ref_np = np.average(days["yield"], weights=days["total"])
    ref_sm = DescrStatsW(days["yield"].to_numpy(), weights=days["total"].to_numpy()).mean
    assert s.weighted_yield == pytest.approx(ref_np, rel=1e-12)
    assert s.weighted_yield == pytest.approx(ref_sm, rel=1e-12)
    assert weighted_yield(days["yield"], days["total"]) == pytest.approx(ref_np, rel=1e-12)
    # the Sunday counts as 1 % of the volume, not a seventh: the plain mean is far lower
    assert s.weighted_yield is not None and s.weighted_yield > 0.98
    assert s.unweighted_yield == pytest.approx(np.mean(days["yield"]))
    assert s.unweighted_yield is not None and s.unweighted_yield < 0.93
    assert s.thin_periods == 1 and s.periods == 7


def test_weighted_yield_skips_empty_periods() -> None:
    assert weighted_yield([0.9, float("nan"), 0.5], [10, 0, 0]) == 0.9
    assert weighted_yield([], []) is None


def test_shift_against_shift_pools_each_shift() -> None:
    # early 06-14 local = 05-13 UTC in winter; late 13-21 UTC; night 21-05 UTC
    d = datetime(2026, 12, 1, tzinfo=UTC)
    rows = [(d + timedelta(hours=6), 95, 100), (d + timedelta(hours=14), 80, 100),
            (d + timedelta(days=1, hours=6), 10, 10), (d + timedelta(days=1, hours=14), 45, 50)]
    shifts = by_period(_hours(rows), BERLIN, "shift")
    assert shifts["period"].tolist() == ["2026-12-01 early", "2026-12-01 late",
                                         "2026-12-02 early", "2026-12-02 late"]
    table = shift_against_shift(shifts, BERLIN).set_index("shift")
    assert table.loc["early", "yield"] == pytest.approx(105 / 110)
    assert table.loc["early", "mean_of_shifts"] == pytest.approx((0.95 + 1.0) / 2)
    assert table.loc["late", "shifts"] == 2
    assert table.loc["late", "lowest"] == pytest.approx(0.8)
    overall = 230 / 260
    assert table.loc["late", "vs_all_pp"] == pytest.approx((125 / 150 - overall) * 100)
    assert "night" not in table.index  # no volume, no row


def test_against_target() -> None:
    periods = pd.DataFrame({"period": ["a", "b", "c"], "good": [99, 97, 0],
                            "total": [100, 100, 0], "yield": [0.99, 0.97, np.nan]})
    out = against_target(periods, 0.98)
    assert out["below"].tolist() == [False, True, False]
    assert out["gap_pp"].iloc[1] == pytest.approx(-1.0)
    with pytest.raises(ValueError, match="between 0 and 100"):
        against_target(periods, 98.0)


def test_yield_axis_keeps_noise_small() -> None:
    # common practice (no published rule): a yield chart starts at a round floor a fixed span
    # below 100 %, so 98.5 % and 99.0 % sit half a point apart on a ten-point scale
    assert yield_axis([0.985, 0.99]) == (0.9, 1.0)
    assert yield_axis([0.985, 0.99], target=0.87) == (0.85, 1.0)
    assert yield_axis([0.72, 0.99]) == (0.7, 1.0)
    assert yield_axis([float("nan")]) == (0.9, 1.0)
    assert yield_axis([0.01]) == (0.0, 1.0)


def test_families_fall_back_to_the_program() -> None:
    pairs = pd.DataFrame({"program": ["HX-210", "HX-230", "MV-44", "HX-210"],
                          "part_family": ["housings", "housings", None, "housings"]})
    mapping = families(pairs)
    assert mapping == {"HX-210": "housings", "HX-230": "housings", "MV-44": "MV-44"}
    assert family_programs(mapping, "housings") == ["HX-210", "HX-230"]
    assert families(pd.DataFrame(columns=["program", "part_family"])) == {}
