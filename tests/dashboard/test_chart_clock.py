"""Charts show the plant's wall clock, as the tables do, whatever zone the browser is in."""

from __future__ import annotations

import pandas as pd

from dashboard import charts


def test_plant_clock_gives_naive_wall_clock_times() -> None:
    # 12:00 UTC on 3 Dec 2026 is 13:00 in Berlin (CET, UTC+1) and 07:00 in New York (EST,
    # UTC-5): IANA tz database rules, via zoneinfo
    df = pd.DataFrame({"ended_at": pd.to_datetime(["2026-12-03T12:00:00Z"], utc=True), "v": [1]})
    berlin = charts.plant_clock(df, "Europe/Berlin")
    assert str(berlin["ended_at"].iloc[0]) == "2026-12-03 13:00:00"
    assert berlin["ended_at"].dt.tz is None
    assert str(charts.plant_clock(df, "America/New_York")["ended_at"].iloc[0]) == (
        "2026-12-03 07:00:00"
    )
    assert str(df["ended_at"].iloc[0]).endswith("+00:00")  # the caller's frame is untouched


def test_chart_data_carries_no_zone_and_a_24_hour_axis() -> None:
    df = pd.DataFrame({
        "ended_at": pd.to_datetime(["2026-12-03T12:00:00Z", "2026-12-03T15:30:00Z"], utc=True),
        "leak": [0.5, 0.7], "verdict": ["pass", "pass"], "cycle": [1, 2], "program": ["P", "P"],
    })  # fmt: skip
    spec = charts.history(charts.plant_clock(df, "Europe/Berlin"), "leak", "leak").to_dict()
    values = next(iter(spec["datasets"].values()))
    assert values[0]["ended_at"] == "2026-12-03T13:00:00"  # no "Z", no offset
    assert spec["encoding"]["x"]["axis"]["format"]["hours"] == "%H:%M"


def test_a_lower_limit_is_drawn_as_a_plausibility_limit_not_a_reject_limit() -> None:
    from analytics import histogram_from_counts

    hist = histogram_from_counts([(-0.5, 0.0, 3), (0.0, 0.5, 40), (0.5, 1.0, 9)],
                                 reject_limit=1.0, lower_limit=-0.5)  # fmt: skip
    spec = charts.histogram(hist, 1.0, "sccm", 0.1).to_dict()
    rules = spec["layer"][-1]
    names = [row["what"] for row in spec["datasets"][rules["data"]["name"]]]
    assert names == ["reject limit", "lower plausibility limit", "guard band"]
    dash = rules["encoding"]["strokeDash"]["scale"]
    solid = [d for d, r in zip(dash["domain"], dash["range"], strict=True) if r == [1, 0]]
    assert solid == ["reject limit"]
