"""The alarm rules: calibration epochs with their own phase I baselines, reject streaks and
rates, link conditions, and raise/clear transitions."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest

from analytics.alarms import (
    AlarmRules,
    Condition,
    calibration_conditions,
    epochs,
    link_conditions,
    reject_conditions,
    transitions,
)

T0 = datetime(2026, 11, 1, 6, 0, tzinfo=UTC)
# NIST/SEMATECH e-Handbook 6.3.2.4 EWMA example data (in control for target 50, s 2.0539)
NIST = [52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6, 49.9, 51.3,
        47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def _cals(values: list[float], start: datetime = T0, step: timedelta = timedelta(hours=4),
          passed: list[bool | None] | None = None) -> pd.DataFrame:
    n = len(values)
    return pd.DataFrame({
        "ended_at": [start + i * step for i in range(n)],
        "program": ["HX-210"] * n,
        "master_loss_pa": values,
        "sensitivity": [0.015] * n,
        "passed": pd.array(passed if passed is not None else [True] * n, dtype="boolean"),
        "reason": [""] * n,
    })


def test_epochs_count_the_events_before_each_calibration() -> None:
    times = [T0 + timedelta(days=d) for d in range(6)]
    events = [T0 + timedelta(days=1.5), T0 + timedelta(days=3.5)]
    assert epochs(times, events).tolist() == [0, 0, 1, 1, 2, 2]


def test_in_control_data_raise_nothing() -> None:
    out = calibration_conditions("L1-S1", _cals(NIST), [], AlarmRules(), T0 + timedelta(days=5))
    assert out == []


def _sawtooth(step_at: int | None = None, step: float = 0.0
              ) -> tuple[pd.DataFrame, list[datetime], list[datetime]]:
    rng = np.random.default_rng(3)
    values, changes, times = [], [], []
    t = T0
    for _seal in range(6):
        for k in range(40):
            jump = step if step_at is not None and len(values) >= step_at else 0.0
            values.append(38.0 + 0.04 * k + rng.normal(0, 0.4) + jump)  # 4 σ of wear per seal
            times.append(t)
            t += timedelta(hours=4)
        changes.append(t - timedelta(hours=2))  # the seal is changed after its 40th
    cals = _cals(values)
    cals["ended_at"] = times
    return cals, times, changes


def _alarmed(cals: pd.DataFrame, times: list[datetime], changes: list[datetime],
             start: int) -> list[bool]:
    rules = AlarmRules()
    out = []
    for i in range(start, len(cals)):
        now = times[i] + timedelta(minutes=1)
        found = calibration_conditions("L2-S2", cals.iloc[: i + 1],
                                       [c for c in changes if c < now], rules, now)
        out.append(any(c.rule == "calibration-drift" for c in found))
    return out


def test_steady_seal_wear_within_an_epoch_is_not_an_alarm() -> None:
    """Master loss climbing with seal wear and falling back at every seal change: each epoch
    judges its calibrations against its own trend, so expected wear stays quiet (the
    always-yellow tile is gone) while the maintenance log restarts the baseline."""
    cals, times, changes = _sawtooth()
    alarmed = _alarmed(cals, times, changes, AlarmRules().phase1 + 2)
    assert sum(alarmed) / len(alarmed) < 0.1
    # right after a seal change the new epoch is still in its phase I: no drift alarm
    after = times.index(min(x for x in times if x > changes[2])) + 3
    now = times[after] + timedelta(minutes=1)
    out = calibration_conditions("L2-S2", cals.iloc[: after + 1],
                                 [c for c in changes if c < now], AlarmRules(), now)
    assert not any(c.rule == "calibration-drift" for c in out)


def test_a_step_the_trend_does_not_explain_alarms_promptly() -> None:
    """A fixture knocked out of place mid-epoch: +2.4 Pa (6 σ) at calibration 100."""
    cals, times, changes = _sawtooth(step_at=100, step=2.4)
    alarmed = _alarmed(cals, times, changes, 100)
    assert any(alarmed[:4])  # within a few calibrations of the step


def test_forecast_errors_match_the_regression_prediction_interval() -> None:
    """The standardised error is (y − ŷ) / se_obs, with se_obs as statsmodels' OLS prediction
    gives it (``get_prediction(...).se_obs``)."""
    import statsmodels.api as sm

    from analytics.alarms import forecast_errors

    rng = np.random.default_rng(11)
    y = 5.0 + 0.1 * np.arange(120) + rng.normal(0, 0.3, 120)
    z = forecast_errors(y, 5, 20)  # short windows first (all values before i), then 20
    assert z.size == 115
    for k, i in enumerate(range(5, 120)):
        x = np.arange(max(0, i - 20), i, dtype=float)
        fit = sm.OLS(y[max(0, i - 20):i], sm.add_constant(x)).fit()
        pred = fit.get_prediction(np.array([[1.0, float(i)]]))
        expected = (y[i] - pred.predicted_mean[0]) / pred.se_obs[0]
        assert z[k] == pytest.approx(expected, rel=1e-9)


def test_failed_and_overdue_and_unjudged_calibrations() -> None:
    cals = _cals([38.0, 38.4, 39.0], passed=[True, None, False])
    cals.loc[2, "reason"] = "ratio 1.8 below 2.5"
    rules = AlarmRules(calibration_interval=timedelta(hours=24))
    now = T0 + timedelta(days=3)
    out = {c.rule: c for c in calibration_conditions("L1-S3", cals, [], rules, now)}
    assert "ratio 1.8" in out["calibration-failed"].message
    assert out["calibration-overdue"].since == T0 + timedelta(hours=8, days=1)
    judged_none = calibration_conditions("L1-S3", _cals([38.0], passed=[None]), [], rules,
                                         T0 + timedelta(hours=1))
    assert judged_none == []  # a station that does not judge: no "failed" alarm


def test_reject_streak_and_rate() -> None:
    times = [T0 + timedelta(seconds=30 * i) for i in range(60)]
    verdicts = ["pass"] * 50 + ["reject", "aborted", "gross", "reject"] + ["pass"] * 6
    assert reject_conditions("L1-S1", verdicts, times, AlarmRules()) == []
    streak = ["pass"] * 57 + ["reject", "aborted", "gross", "reject"]
    out = reject_conditions("L1-S1", streak, [*times, times[-1]], AlarmRules())
    assert [c.rule for c in out] == ["reject-streak"]
    assert out[0].message == "3 rejects in a row"  # the abort measured nothing
    noisy = (["pass"] * 4 + ["reject"]) * 12
    rate = reject_conditions("L1-S1", noisy, times, AlarmRules())
    assert [c.rule for c in rate] == ["reject-rate"] and "10 rejects in the last 50" in \
        rate[0].message


def test_link_conditions() -> None:
    now = T0 + timedelta(hours=1)
    rules = AlarmRules()
    off = link_conditions("L1-S1", state="offline", state_since=now - timedelta(minutes=7),
                          last_result=now - timedelta(minutes=8), typical_cycle=None,
                          quarantined_10min=0, rules=rules, now=now)
    assert [c.rule for c in off] == ["offline"] and "7 min" in off[0].message
    quiet = link_conditions("L1-S1", state="online", state_since=T0,
                            last_result=now - timedelta(minutes=12),
                            typical_cycle=timedelta(seconds=40), quarantined_10min=45,
                            gaps=[(101, 104, now)], conflicts=2, rules=rules, now=now)
    assert [c.rule for c in quiet] == ["silent", "garbage", "gap", "conflict"]
    assert "cycles 101..104" in quiet[2].message
    many = link_conditions("L1-S1", state="online", state_since=T0, last_result=now,
                           typical_cycle=timedelta(seconds=40), quarantined_10min=0,
                           gaps=[(5, 5, now - timedelta(minutes=30)), (9, 12, now)],
                           rules=rules, now=now)  # fmt: skip
    assert [(c.key, c.since) for c in many] == [("gap:L1-S1", now - timedelta(minutes=30))]
    assert many[0].message.startswith("5 cycles lost in 2 gaps")  # one alarm, not one per gap
    assert "cycles 9..12" in many[0].message
    later = now + rules.gap_window + timedelta(minutes=31)  # both gaps older than the window
    assert not link_conditions("L1-S1", state="online", state_since=T0, last_result=later,
                               typical_cycle=timedelta(seconds=40), quarantined_10min=0,
                               gaps=[(5, 5, now - timedelta(minutes=30)), (9, 12, now)],
                               rules=rules, now=later)  # fmt: skip


def test_transitions_raise_once_and_clear_when_gone() -> None:
    a = Condition("reject-streak:L1-S1", "reject-streak", "L1-S1", "alarm", T0, "3 rejects")
    b = Condition("silent:L1-S2", "silent", "L1-S2", "warning", T0, "no result")
    first = transitions([a, b], [])
    assert [(t.key, t.change) for t in first] == [(a.key, "raise"), (b.key, "raise")]
    assert transitions([a, b], [a.key, b.key]) == []  # still true: nothing changes
    assert [(t.key, t.change) for t in transitions([b], [a.key, b.key])] == [(a.key, "clear")]


def test_maintenance_after_the_last_calibration_ends_the_old_epochs_drift() -> None:
    """A seal change resolves the drift of the worn seal: until the new epoch has its own
    phase I calibrations there is nothing to judge (NIST/SEMATECH e-Handbook 6.3.1: limits
    come from an in-control baseline of the process as it is now)."""
    from datetime import UTC, datetime, timedelta

    import pandas as pd

    from analytics.alarms import AlarmRules, calibration_conditions

    t0 = datetime(2026, 11, 1, tzinfo=UTC)
    n = 30
    cals = pd.DataFrame({
        "ended_at": [t0 + timedelta(hours=6 * i) for i in range(n)],
        "program": "P1",
        "master_loss_pa": [3.0 + (0.02 * i if i >= 10 else 0.01 * (i % 3)) for i in range(n)],
        "sensitivity": 0.02,
        "passed": True,
        "reason": "",
    })  # fmt: skip
    now = t0 + timedelta(days=10)
    before = calibration_conditions("S", cals, [], AlarmRules(), now)
    assert any(c.rule == "calibration-drift" for c in before)
    after = calibration_conditions("S", cals, [now - timedelta(hours=1)], AlarmRules(), now)
    assert not any(c.rule == "calibration-drift" for c in after)


def test_a_station_clock_running_ahead_is_a_condition_and_silence_is_judged_on_ours() -> None:
    """A result cannot arrive before it ended: a station stamping its results 7 minutes after
    the gateway received them has its clock ahead. The skew is the median (checked against
    the standard library's ``statistics.median``), so a few late reads do not move it."""
    import statistics

    from analytics.alarms import clock_skew, link_conditions

    now = datetime(2026, 12, 3, 12, tzinfo=UTC)
    received = [now - timedelta(seconds=30 * i) for i in range(20)]
    lead = [420.0 + (i % 3) for i in range(20)]
    lead[3] = -3600.0  # one read an hour late (after an outage)
    ended = [r + timedelta(seconds=s) for r, s in zip(received, lead, strict=True)]
    skew = clock_skew(ended, received)
    assert skew is not None
    assert skew.total_seconds() == pytest.approx(statistics.median(lead))
    assert clock_skew(ended[:4], received[:4]) is None  # too few to say
    conds = link_conditions("L1-S3", state="online", state_since=None, last_result=max(ended),
                            typical_cycle=timedelta(seconds=30), quarantined_10min=0,
                            skew=skew, rules=AlarmRules(), now=now)
    (clock,) = [c for c in conds if c.rule == "clock"]
    assert clock.severity == "warning" and "7 min ahead" in clock.message
    # its newest result is stamped 7 min in the future; on the gateway's clock it came 0 s
    # ago, so the station is not silent; ten minutes later it is
    assert not [c for c in conds if c.rule == "silent"]
    later = link_conditions("L1-S3", state="online", state_since=None,
                            last_result=max(ended), typical_cycle=timedelta(seconds=30),
                            quarantined_10min=0, skew=skew, rules=AlarmRules(),
                            now=now + timedelta(minutes=10))
    assert [c.rule for c in later] == ["clock", "silent"]
    behind = clock_skew([r - timedelta(seconds=40) for r in received], received)
    assert behind is not None and not [
        c for c in link_conditions("S", state="online", state_since=None, last_result=now,
                                   typical_cycle=None, quarantined_10min=0, skew=behind,
                                   rules=AlarmRules(), now=now) if c.rule == "clock"]
