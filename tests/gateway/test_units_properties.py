"""Property tests: conversions round-trip and the decay formula inverts."""

from __future__ import annotations

import contextlib

import pytest
from hypothesis import given
from hypothesis import strategies as st

from gateway.calibration import Calibration, expected_loss_pa
from gateway.calibration import test_time_for_loss as time_for_loss
from gateway.errors import UnitError
from gateway.units import convert, known_units, parse_quantity

finite = st.floats(min_value=-1e9, max_value=1e9, allow_nan=False)
positive = st.floats(min_value=1e-6, max_value=1e6)


@given(finite, st.sampled_from(known_units("pressure")), st.sampled_from(known_units("pressure")))
def test_pressure_round_trip(value: float, a: str, b: str) -> None:
    back = convert(convert(value, a, b, "pressure"), b, a, "pressure")
    assert back == pytest.approx(value, rel=1e-9, abs=1e-9)


@given(
    finite,
    st.sampled_from(known_units("leak")),
    st.sampled_from(known_units("leak")),
    st.sampled_from([0.0, 20.0]),
)
def test_leak_round_trip(value: float, a: str, b: str, ref: float) -> None:
    there = convert(value, a, b, "leak", from_reference_c=ref, to_reference_c=0.0)
    back = convert(there, b, a, "leak", from_reference_c=0.0, to_reference_c=ref)
    assert back == pytest.approx(value, rel=1e-9, abs=1e-9)


@given(positive, positive, positive)
def test_decay_inverse(volume_cc: float, leak: float, seconds: float) -> None:
    loss = expected_loss_pa(volume_cc * 1e-6, leak, seconds)
    assert time_for_loss(volume_cc * 1e-6, leak, loss) == pytest.approx(seconds, rel=1e-9)


@given(
    st.floats(min_value=0, max_value=1e4),
    st.floats(min_value=1, max_value=1e4),
    positive,
    st.floats(min_value=-100, max_value=100),
)
def test_leak_rate_loss_inverse(master: float, span: float, std: float, leak: float) -> None:
    cal = Calibration(master, master + span, std)
    # Subtracting the master loss cancels digits: allow rounding of the loss times sensitivity.
    tolerance = 1e-12 * (master + span) * cal.sensitivity + 1e-9
    assert cal.leak_rate(cal.loss_for(leak)) == pytest.approx(leak, rel=1e-9, abs=tolerance)


@given(st.text(max_size=30))
def test_parse_never_crashes(text: str) -> None:
    with contextlib.suppress(UnitError):
        parse_quantity(text, "pressure")


def test_parse_examples() -> None:
    assert parse_quantity("0.05 psi", "pressure").canonical == pytest.approx(344.7378646584)
    assert parse_quantity("5sccm", "leak").canonical == 5.0
    # 1 mbar·L/s = 59.2154 sccm (same temperature; common conversion table value)
    assert parse_quantity("1.2e-3 mbar*l/s", "leak").canonical == pytest.approx(
        1.2e-3 * 59.2154, rel=1e-5
    )
    with pytest.raises(UnitError, match="known"):
        parse_quantity("3 parsec", "pressure")
