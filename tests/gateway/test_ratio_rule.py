"""One rule for the calibration ratio: undefined (None) when the master loss is not above
zero, in the calibration arithmetic, the records, the reports and the simulator; the window
is then judged by the span against the loss noise.

The ratio is standard loss / master loss and the span standard loss − master loss (common
practice); a master part that gains pressure (thermal effects) gives a master loss ≤ 0.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pandas as pd
import pytest

from analytics.drift import HealthConfig, calibration_health
from gateway.calibration import Calibration
from gateway.profiles import StationContext, load_profile
from gateway.profiles.decoders import serial_parser
from gateway.records import CalibrationEvent

T0 = datetime(2026, 12, 3, 6, tzinfo=UTC)


@pytest.mark.parametrize("master", [0.0, -0.4])
def test_no_ratio_without_a_positive_master_loss(master: float) -> None:
    cal = Calibration(master, 200.0, 3.0)
    assert cal.ratio is None
    assert cal.window(0.3) == pytest.approx((200.0 - master) / 0.3)
    assert cal.leak_rate(200.0) == pytest.approx(3.0)  # the span still converts


def test_a_record_with_a_negative_master_loss_has_no_ratio_and_no_false_alarm() -> None:
    parser = serial_parser(load_profile("lf-delim").serial,  # type: ignore[arg-type]
                           StationContext("S", "L", "UTC"))
    [cal] = parser.parse(["C;2026-12-03 07:16:02;HX-210;-0.4;200.0;3.000;350.0;;OK"], 1, T0)
    assert isinstance(cal, CalibrationEvent) and cal.ratio is None and cal.passed is True
    rows = []
    for i in range(12):  # a steady station: master loss about 0, span 200 Pa, noise 0.3 Pa
        master = [-0.4, 0.1, -0.2, 0.3, -0.1, 0.0][i % 6]
        rows.append({"station": "S", "program": "HX-210", "ended_at": T0 + timedelta(hours=i),
                     "master_loss_pa": master, "standard_loss_pa": master + 200.0,
                     "ratio": None, "sensitivity": 3.0 / 200.0, "passed": True, "reason": ""})
    health = calibration_health(pd.DataFrame(rows), HealthConfig(min_ratio=2.0))
    kinds = {a.kind for a in health.alarms}
    assert "ratio" not in kinds and "window" not in kinds, health.alarms


def test_a_span_lost_in_the_noise_is_flagged() -> None:
    rows = []
    for i in range(12):  # span of 2 Pa against a master loss that scatters by ~1 Pa
        master = [-1.0, 1.0, 0.0, 1.5, -1.5, 0.5][i % 6]
        rows.append({"station": "S", "program": "P", "ended_at": T0 + timedelta(hours=i),
                     "master_loss_pa": master, "standard_loss_pa": master + 2.0,
                     "ratio": None, "sensitivity": 1.0, "passed": True, "reason": ""})
    health = calibration_health(pd.DataFrame(rows))
    assert any(a.kind == "window" for a in health.alarms)


def test_the_simulator_uses_the_same_rule() -> None:
    from sim.scenario import load_scenario
    from sim.station import SimCalibration, StationModel

    scenario = load_scenario("demo")
    station = scenario.station("L2-S1")
    model = StationModel(scenario, station, T0)
    cals = [a.record for a in model.activities(400) if isinstance(a.record, SimCalibration)]
    assert cals
    for c in cals:
        if c.master_loss_pa <= 0:
            assert c.ratio is None
        else:
            assert c.ratio == pytest.approx(c.standard_loss_pa / c.master_loss_pa)
