"""``leakfleet calc``: size a test from the command line; every input carries its unit."""

from __future__ import annotations

import argparse
import json
from typing import Any

ORDER = 80

_REF_HELP = "reference temperature of standard volume: 0 (default) or 20 °C"
#: the gas temperature when none is given: a part at room temperature (common practice)
ROOM_C = 20.0


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "calc",
        help="leak-rate, decay, test-time and unit calculations",
        description=(
            "Calculator for test engineers. Every quantity takes a unit, e.g. 0.05psi, 5sccm, "
            "120cc, 10s, '1.2e-3 mbar*l/s'. Standard conditions: 101.325 kPa and 0 °C "
            "(20 °C with --reference 20). Prints a readable line, or one JSON object with --json."
        ),
    )
    calc = parser.add_subparsers(dest="calc_command", metavar="CALCULATION", required=True)

    p = calc.add_parser(
        "leak-rate",
        help="a part's leak rate from its loss and the calibration",
        description=(
            "Leak rate = (loss - master_loss) x standard / (standard_loss - master_loss). "
            "A part that loses less than the master reads negative."
        ),
    )
    p.add_argument(
        "--loss", required=True, help="the part's pressure loss over the test, e.g. 0.10psi"
    )
    p.add_argument("--master-loss", required=True, help="the master part's loss (zero offset)")
    p.add_argument(
        "--standard-loss", required=True, help="the master part's loss with the leak standard open"
    )
    p.add_argument("--standard", required=True, help="the leak standard's flow, e.g. 5sccm")
    p.add_argument("--unit", default="sccm", help="unit to print the leak rate in (default sccm)")
    _common(p)
    p.set_defaults(func=_leak_rate)

    p = calc.add_parser(
        "decay",
        help="expected pressure loss for a leak, volume and test time",
        description="Expected loss = Q x P_std x t / V (ideal gas at the reference temperature).",
    )
    p.add_argument(
        "--volume", required=True, help="test volume (part + fixture + circuit), e.g. 120cc"
    )
    p.add_argument("--leak", required=True, help="leak rate, e.g. 5sccm")
    p.add_argument("--test-time", required=True, help="test time, e.g. 10s")
    p.add_argument(
        "--pressure",
        help="test pressure (gauge), e.g. 10psi; used to check the loss is < 10 %% of it",
    )
    p.add_argument("--gas-temperature",
                   help="temperature of the gas in the part, e.g. 25C (default 20 °C, room)")
    p.add_argument("--unit", default="Pa", help="unit to print the loss in (default Pa)")
    _common(p)
    p.set_defaults(func=_decay)

    p = calc.add_parser(
        "test-time",
        help="test time needed for a leak to show a given loss",
        description="Test time = V x loss / (Q x P_std) (ideal gas at the reference temperature).",
    )
    p.add_argument("--volume", required=True, help="test volume, e.g. 120cc")
    p.add_argument("--leak", required=True, help="leak rate to detect, e.g. 5sccm")
    p.add_argument("--loss", required=True, help="pressure loss wanted, e.g. 0.1psi")
    p.add_argument("--gas-temperature",
                   help="temperature of the gas in the part, e.g. 25C (default 20 °C, room)")
    _common(p)
    p.set_defaults(func=_test_time)

    p = calc.add_parser(
        "convert",
        help="convert a pressure, leak rate, volume or time between units",
        description="Convert, e.g.: leakfleet calc convert 1 mbar*l/s sccm",
    )
    p.add_argument("value", help="the number (or number with unit)")
    p.add_argument("from_unit", metavar="FROM", help="unit of the value")
    p.add_argument("to_unit", metavar="TO", help="unit wanted")
    p.add_argument(
        "--from-reference",
        type=float,
        default=0.0,
        help="reference °C of FROM: 0 or 20, the basis of every leak unit (gateway/units.py)",
    )
    p.add_argument(
        "--to-reference",
        type=float,
        default=0.0,
        help="reference °C of TO: 0 or 20, the basis of every leak unit (gateway/units.py)",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_convert)


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--reference", type=float, default=0.0, help=_REF_HELP)
    p.add_argument("--json", action="store_true", help="print one JSON object")


def _emit(args: argparse.Namespace, data: dict[str, Any], line: str) -> int:
    print(json.dumps(data) if args.json else line)
    return 0


def _q(text: str, kind: str, ref: float = 0.0) -> float:
    from gateway.units import parse_quantity

    return parse_quantity(text, kind, reference_c=ref).canonical  # type: ignore[arg-type]


def _leak_rate(args: argparse.Namespace) -> int:
    from gateway.calibration import Calibration
    from gateway.units import normalise_unit, sccm_to

    cal = Calibration(
        master_loss_pa=_q(args.master_loss, "pressure"),
        standard_loss_pa=_q(args.standard_loss, "pressure"),
        standard_sccm=_q(args.standard, "leak", args.reference),
    )
    loss = _q(args.loss, "pressure")
    leak = cal.leak_rate(loss)
    unit = normalise_unit(args.unit, "leak")
    shown = sccm_to(leak, unit, reference_c=args.reference)
    data = {
        "leak_rate_sccm": leak,
        "leak_rate": shown,
        "unit": unit,
        "loss_pa": loss,
        "master_loss_pa": cal.master_loss_pa,
        "standard_loss_pa": cal.standard_loss_pa,
        "standard_sccm": cal.standard_sccm,
        "ratio": cal.ratio,
        "sensitivity_sccm_per_pa": cal.sensitivity,
        "reference_c": args.reference,
    }
    ratio = "undefined (master loss ≤ 0)" if cal.ratio is None else f"{cal.ratio:.3g}"
    line = (
        f"leak rate {shown:.6g} {unit}  (calibration: ratio {ratio}, "
        f"sensitivity {cal.sensitivity:.4g} sccm/Pa, span {cal.span_pa:.4g} Pa)"
    )
    return _emit(args, data, line)


def _gas_c(args: argparse.Namespace) -> float:
    """The gas temperature: given, or room temperature (20 °C), never silently 0 °C."""
    if args.gas_temperature:
        return _q(args.gas_temperature, "temperature")
    return ROOM_C


def _leak_fields(leak: float, reference_c: float, gas_c: float) -> dict[str, Any]:
    from gateway.units import sccm_to

    # the leak in canonical sccm (0 °C, 101.325 kPa) and as given (on the --reference basis)
    return {"leak_sccm": leak, "leak_sccm_reference_c": 0.0,
            "leak_as_given_sccm": sccm_to(leak, "sccm", reference_c=reference_c),
            "reference_c": reference_c, "gas_temperature_c": gas_c}


def _decay(args: argparse.Namespace) -> int:
    from gateway.calibration import expected_loss_pa
    from gateway.units import from_canonical, normalise_unit

    volume = _q(args.volume, "volume")
    leak = _q(args.leak, "leak", args.reference)  # canonical: converted to the 0 °C basis once
    t = _q(args.test_time, "time")
    gas_c = _gas_c(args)
    # the leak is on the 0 °C basis now: the gas temperature term is applied once, here
    loss = expected_loss_pa(volume, leak, t, reference_c=0.0, gas_temperature_c=gas_c)
    unit = normalise_unit(args.unit, "pressure")
    shown = from_canonical(loss, unit, "pressure")
    data: dict[str, Any] = {
        "loss_pa": loss,
        "loss": shown,
        "unit": unit,
        "volume_m3": volume,
        **_leak_fields(leak, args.reference, gas_c),
        "test_time_s": t,
    }
    line = f"expected loss {shown:.6g} {unit} over {t:g} s (gas at {gas_c:g} °C)"
    if args.pressure:
        p = _q(args.pressure, "pressure")
        data["test_pressure_pa"] = p
        share = loss / p if p > 0 else float("inf")
        data["loss_fraction_of_test_pressure"] = share
        if share > 0.10:
            line += (
                f"\nwarning: the loss is {share:.0%} of the test pressure; keep it under about "
                "10 % (ASTM E2930) or the linear decay model no longer holds"
            )
    return _emit(args, data, line)


def _test_time(args: argparse.Namespace) -> int:
    from gateway.calibration import test_time_for_loss

    volume = _q(args.volume, "volume")
    leak = _q(args.leak, "leak", args.reference)  # canonical: the 0 °C basis
    loss = _q(args.loss, "pressure")
    gas_c = _gas_c(args)
    t = test_time_for_loss(volume, leak, loss, reference_c=0.0, gas_temperature_c=gas_c)
    data = {
        "test_time_s": t,
        "volume_m3": volume,
        **_leak_fields(leak, args.reference, gas_c),
        "loss_pa": loss,
    }
    return _emit(args, data, f"test time {t:.4g} s for {loss:.4g} Pa of loss "
                             f"(gas at {gas_c:g} °C)")


def _convert(args: argparse.Namespace) -> int:
    from gateway.units import convert, guess_kind, normalise_unit, parse_quantity

    kind = guess_kind(args.from_unit)
    value = parse_quantity(args.value, kind, default_unit=args.from_unit).value
    to_unit = normalise_unit(args.to_unit, kind)
    from_unit = normalise_unit(args.from_unit, kind)
    out = convert(
        value,
        from_unit,
        to_unit,
        kind,
        from_reference_c=args.from_reference,
        to_reference_c=args.to_reference,
    )
    data = {"value": out, "unit": to_unit, "input": value, "input_unit": from_unit, "kind": kind}
    return _emit(args, data, f"{value:g} {from_unit} = {out:.6g} {to_unit}")
