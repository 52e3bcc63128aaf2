"""Calibration and pressure-decay arithmetic, as the trade does it.

A calibration runs the master (known-good) part twice: plain, and with a leak standard of known
flow opened. The plain loss is the zero offset; the extra loss with the standard open is the span.
A part's leak rate is then ``(loss − master_loss) × standard_sccm / (standard_loss − master_loss)``,
negative for a part that loses less than the master did.

The gas law ties loss to flow: ``Q_std = V·ΔP / (Δt·P_std)`` when the gas is at the reference
temperature, and ``Q_std = (V/Δt)·(T_ref/P_std)·(P1/T1 − P2/T2)`` with absolute pressures and
temperatures when it is not.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from gateway.units import KELVIN_OFFSET, P_STD_PA, reference_temperature_k

__all__ = [
    "Calibration",
    "effective_volume_m3",
    "expected_loss_pa",
    "flow_from_pressures",
    "leak_from_loss",
    "sccm_to_m3s",
    "test_time_for_loss",
]

_M3S_PER_SCCM = 1e-6 / 60.0


def sccm_to_m3s(sccm: float) -> float:
    """Standard volume flow in m³/s."""
    return sccm * _M3S_PER_SCCM


def _positive(name: str, value: float) -> None:
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"{_WORDS.get(name, name)} must be a positive finite number, got "
                         f"{_g(value)}")


#: the words a person reads in an error, for the canonical field names
_WORDS = {
    "master_loss_pa": "master loss", "standard_loss_pa": "standard loss",
    "standard_sccm": "leak standard's flow", "span_pa": "span",
    "test_time_s": "test time", "volume_m3": "volume",
}  # fmt: skip


def _g(value: object) -> str:
    """A number with sensible digits (344.7378646584 -> 344.74)."""
    return f"{value:.5g}" if isinstance(value, float) else repr(value)


@dataclass(frozen=True, slots=True)
class Calibration:
    """A station's calibration: master loss (zero), master + standard loss (span)."""

    master_loss_pa: float
    standard_loss_pa: float
    standard_sccm: float

    def __post_init__(self) -> None:
        for name in ("master_loss_pa", "standard_loss_pa"):
            if not math.isfinite(getattr(self, name)):
                raise ValueError(f"the {_WORDS[name]} must be a finite number")
        _positive("standard_sccm", self.standard_sccm)
        if self.standard_loss_pa <= self.master_loss_pa:
            raise ValueError(
                "with the leak standard open the master part must lose more than without it "
                f"(standard loss {_g(self.standard_loss_pa)} Pa, master loss "
                f"{_g(self.master_loss_pa)} Pa): check the standard is open and connected"
            )

    @property
    def span_pa(self) -> float:
        """Loss the standard adds on top of the master part's own."""
        return self.standard_loss_pa - self.master_loss_pa

    @property
    def ratio(self) -> float | None:
        """standard_loss / master_loss, or None when the master loss is not above zero: the
        ratio is undefined there (one rule in records, reports and the simulator); judge such
        a calibration by ``window`` instead."""
        if self.master_loss_pa <= 0:
            return None
        return self.standard_loss_pa / self.master_loss_pa

    def window(self, loss_noise_pa: float) -> float:
        """The span in units of the loss noise (σ of a master-part loss): how far a leak of the
        standard's size stands out of the scatter of a good part. Meaningful also when the
        master loss is near or below zero, where the ratio is not."""
        _positive("loss_noise_pa", loss_noise_pa)
        return self.span_pa / loss_noise_pa

    @property
    def sensitivity(self) -> float:
        """sccm per Pa of loss above the master's."""
        return self.standard_sccm / self.span_pa

    def leak_rate(self, loss_pa: float) -> float:
        """A part's leak rate in sccm from its loss in Pa."""
        return (loss_pa - self.master_loss_pa) * self.sensitivity

    def loss_for(self, leak_sccm: float) -> float:
        """The loss in Pa that this calibration reads as ``leak_sccm``."""
        return self.master_loss_pa + leak_sccm / self.sensitivity


def leak_from_loss(
    loss_pa: float, master_loss_pa: float, standard_loss_pa: float, standard_sccm: float
) -> float:
    return Calibration(master_loss_pa, standard_loss_pa, standard_sccm).leak_rate(loss_pa)


def effective_volume_m3(
    span_pa: float, standard_sccm: float, test_time_s: float, *, reference_c: float = 0.0
) -> float:
    """Volume the standard's flow sees, from the span it produced (isothermal, gas at T_ref)."""
    del reference_c  # the isothermal form at T_ref does not depend on which base is used
    _positive("span_pa", span_pa)
    _positive("standard_sccm", standard_sccm)
    _positive("test_time_s", test_time_s)
    return sccm_to_m3s(standard_sccm) * P_STD_PA * test_time_s / span_pa


def expected_loss_pa(
    volume_m3: float,
    leak_sccm: float,
    test_time_s: float,
    *,
    reference_c: float = 0.0,
    gas_temperature_c: float | None = None,
) -> float:
    """Pressure loss a leak of ``leak_sccm`` causes in ``volume_m3`` over ``test_time_s``.

    The leak is in standard cm³/min on the ``reference_c`` basis; gas at ``gas_temperature_c``
    (the reference temperature when not given) loses more pressure per mole when warmer.
    """
    _positive("volume_m3", volume_m3)
    if not math.isfinite(test_time_s) or test_time_s < 0:
        raise ValueError(f"test_time_s must be >= 0, got {test_time_s!r}")
    t_ref = reference_temperature_k(reference_c)
    t_gas = t_ref if gas_temperature_c is None else gas_temperature_c + KELVIN_OFFSET
    _positive("gas temperature (K)", t_gas)
    return sccm_to_m3s(leak_sccm) * P_STD_PA * test_time_s / volume_m3 * (t_gas / t_ref)


def test_time_for_loss(
    volume_m3: float,
    leak_sccm: float,
    loss_pa: float,
    *,
    reference_c: float = 0.0,
    gas_temperature_c: float | None = None,
) -> float:
    """Test time in s for a leak to produce ``loss_pa`` (the inverse of expected_loss_pa)."""
    _positive("leak_sccm", leak_sccm)
    _positive("loss_pa", loss_pa)
    per_second = expected_loss_pa(
        volume_m3, leak_sccm, 1.0, reference_c=reference_c, gas_temperature_c=gas_temperature_c
    )
    return loss_pa / per_second


def flow_from_pressures(
    volume_m3: float,
    test_time_s: float,
    p1_abs_pa: float,
    t1_c: float,
    p2_abs_pa: float,
    t2_c: float,
    *,
    reference_c: float = 0.0,
) -> float:
    """Leak in sccm from start/end absolute pressure and gas temperature (the temperature form)."""
    _positive("volume_m3", volume_m3)
    _positive("test_time_s", test_time_s)
    t_ref = reference_temperature_k(reference_c)
    t1 = t1_c + KELVIN_OFFSET
    t2 = t2_c + KELVIN_OFFSET
    _positive("t1 (K)", t1)
    _positive("t2 (K)", t2)
    q_m3s = (volume_m3 / test_time_s) * (t_ref / P_STD_PA) * (p1_abs_pa / t1 - p2_abs_pa / t2)
    return q_m3s / _M3S_PER_SCCM
