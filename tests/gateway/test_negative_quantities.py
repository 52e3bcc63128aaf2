"""Negative quantities are values on the command line in both forms, "--x -2sccm" and
"--x=-2sccm", as --help shows them: a lower limit below zero, a master part that gains
pressure, a cold part, a negative reference value."""

from __future__ import annotations

import pytest

from gateway.cli import build_parser, main


@pytest.mark.parametrize(("argv", "dest", "value"), [
    (["report", "advise", "--lower-limit", "-2sccm"], "lower_limit", "-2sccm"),
    (["report", "advise", "--lower-limit=-2sccm"], "lower_limit", "-2sccm"),
    (["report", "type1", "--reference", "-0.05sccm"], "reference", "-0.05sccm"),
    (["calc", "leak-rate", "--master-loss", "-0.3psi", "--standard-loss", "2psi",
      "--standard", "3sccm", "--loss", "-.5Pa"], "master_loss", "-0.3psi"),
    (["calc", "decay", "--volume", "1cc", "--leak", "1sccm", "--test-time", "1s",
      "--gas-temperature", "-5C"], "gas_temperature", "-5C"),
    (["calc", "decay", "--volume", "1cc", "--leak", "-2e-3sccm", "--test-time", "1s"],
     "leak", "-2e-3sccm"),
])
def test_negative_values_parse(argv: list[str], dest: str, value: str) -> None:
    args = build_parser().parse_args(argv)
    assert getattr(args, dest) == value


def test_a_negative_master_loss_computes(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["calc", "leak-rate", "--master-loss", "-0.3psi", "--standard-loss", "2psi",
                 "--standard", "3sccm", "--loss", "1psi"]) == 0
    out = capsys.readouterr().out
    assert "ratio undefined (master loss ≤ 0)" in out
