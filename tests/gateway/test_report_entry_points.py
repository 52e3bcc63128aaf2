"""Every report can be built without the command line: typed options in, the same report out.

The dashboard and other callers use these entry points; the CLI only parses options into them.
Each check builds a report both ways from the same input and compares the JSON documents."""

from __future__ import annotations

import json
import random
from datetime import date
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.reports.advice import AdviceOptions, advice_report_of
from gateway.reports.gauge import GrrOptions, Type1Options, grr_report_of, type1_report_of
from gateway.reports.inputs import read_standards
from gateway.reports.master import MasterOptions, master_report_of
from gateway.reports.standards import StandardsOptions, standards_report_of


def _cli(capsys: pytest.CaptureFixture[str], *argv: str) -> dict[str, object]:
    assert main(["report", *argv, "--json"]) == 0
    doc: dict[str, object] = json.loads(capsys.readouterr().out)
    return doc


def test_gauge_studies_from_typed_options(tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    rng = random.Random(3)
    grr = tmp_path / "grr.csv"
    grr.write_text("part,operator,value\n" + "".join(
        f"P{p},O{o},{0.1 * p + rng.gauss(0, 0.02):.4f}\n"
        for p in range(1, 6) for o in range(1, 4) for _ in range(2)))
    typed = grr_report_of(None, None, GrrOptions(tolerance_sccm=2.0, input=str(grr)))
    assert typed.to_json() == _cli(capsys, "grr", "--input", str(grr), "--tolerance", "2 sccm")
    one = tmp_path / "type1.csv"
    one.write_text("value\n" + "".join(f"{0.5 + rng.gauss(0, 0.01):.4f}\n" for _ in range(25)))
    typed = type1_report_of(None, None, Type1Options(reference_sccm=0.5, tolerance_sccm=2.0,
                                                     input=str(one)))
    assert typed.to_json() == _cli(capsys, "type1", "--input", str(one), "--reference",
                                   "0.5 sccm", "--tolerance", "2 sccm")


def test_advice_and_master_from_typed_options(tmp_path: Path,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    rng = random.Random(4)
    losses = tmp_path / "losses.csv"
    losses.write_text("loss\n" + "".join(f"{40 + rng.gauss(0, 0.5):.3f}\n" for _ in range(30)))
    typed = advice_report_of(None, None, AdviceOptions(
        input=str(losses), test_time_s=10.0, reject_limit_sccm=2.0, sensitivity=0.05))
    assert typed.to_json() == _cli(capsys, "advise", "--input", str(losses), "--test-time",
                                   "10 s", "--reject-limit", "2 sccm", "--sensitivity", "0.05")
    parts = tmp_path / "parts.csv"
    parts.write_text("part,value\n" + "".join(
        f"M{p},{0.05 * p + rng.gauss(0, 0.01):.4f}\n" for p in range(1, 4) for _ in range(8)))
    typed = master_report_of(None, None, MasterOptions(input=str(parts)))
    assert typed.to_json() == _cli(capsys, "master", "--input", str(parts))


def test_standards_register_from_typed_options(tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    register = tmp_path / "standards.csv"
    register.write_text("serial,station,nominal_sccm,reference_pressure_pa,certificate_date,"
                        "due_date\n"
                        "LS-1,L1-S1,3,350000,2026-01-10,2027-01-10\n"
                        "LS-2,L1-S2,2,137895,2025-12-01,2026-12-20\n")
    typed = standards_report_of(None, None, StandardsOptions(
        read_standards(str(register)), "Europe/Berlin", date(2026, 12, 4), 30))
    assert typed.to_json() == _cli(capsys, "standards", "--standards", str(register),
                                   "--no-store", "--today", "2026-12-04", "--timezone",
                                   "Europe/Berlin")
    due = {s["serial"]: s["status"] for s in typed.to_json()["result"]["standards"]}
    assert due["LS-2"] != due["LS-1"]  # 16 days left within the 30-day horizon
