"""Gauge R&R on quantised readings: never a traceback, never "acceptable" when the readings
cannot show the gauge's scatter.

Source: AIAG MSA 4th ed., discrimination (the "rule of tens"): the readings must resolve at
least one tenth of the tolerance or of the process spread (from memory of the manual's
wording). The ANOVA itself is checked against statsmodels elsewhere (test_gauge_studies.py).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from analytics.gauge import grr_anova, grr_average_range

PARTS = [0.1, 0.2, 0.3, 0.2, 0.4]


def _study(shift_c: float = 0.0, noise: float = 0.0) -> pd.DataFrame:
    rows = []
    for j, op in enumerate("ABC"):
        for i, value in enumerate(PARTS):
            for t in range(2):
                extra = noise * ((i + t + j) % 3 - 1)
                rows.append({"part": f"P{i + 1}", "operator": op,
                             "value": round(value + (shift_c if j == 2 else 0.0) + extra, 3)})
    return pd.DataFrame(rows)


@pytest.mark.parametrize("method", [grr_anova, grr_average_range])
@pytest.mark.parametrize("shift", [0.0, 0.1])
def test_identical_repeats_are_not_assessable(method, shift: float) -> None:  # type: ignore[no-untyped-def]
    report = method(_study(shift), tolerance=2.0)
    assert report.ev == 0.0
    assert report.verdict.startswith("not assessable")
    assert "resolution" in report.verdict and report.resolution == pytest.approx(0.1)


def test_fine_readings_are_judged_as_usual() -> None:
    report = grr_anova(_study(0.0, noise=0.004), tolerance=2.0)
    assert report.ev > 0 and not report.verdict.startswith("not assessable")
    assert report.resolution is not None and report.resolution < 0.2 / 10


def test_the_cli_never_shows_a_traceback(tmp_path: Path) -> None:
    csv = tmp_path / "quantised.csv"
    _study().to_csv(csv, index=False)
    root = Path(__file__).resolve().parents[2]
    out = subprocess.run([sys.executable, "-m", "gateway", "report", "grr", "--input", str(csv),
                          "--tolerance", "2sccm"], capture_output=True, text=True, cwd=root,
                         timeout=60)
    assert out.returncode == 0, out.stderr
    assert "Traceback" not in out.stderr and "not assessable" in out.stdout


def test_one_sided_tolerance_and_av_with_the_interaction() -> None:
    # AIAG MSA 4th ed. (one-sided specification, from memory): %GRR of tolerance =
    # 3·σGRR / (USL − mean); the reproducibility includes the part×operator interaction
    # (AIAG ANOVA method), and %AV is AV over TV
    study = _study(0.0, noise=0.004)
    report = grr_anova(study, one_sided_limit=2.0)
    mean = float(study["value"].mean())
    assert report.pct_grr_tolerance == pytest.approx(100 * 3 * report.grr / (2.0 - mean))
    assert "one-sided" in report.tolerance_convention
    assert report.av == pytest.approx((report.operator ** 2 + report.interaction ** 2) ** 0.5)
    assert report.pct_av == pytest.approx(100 * report.av / report.tv)
    two = grr_anova(study, tolerance=2.0)
    assert two.pct_grr_tolerance == pytest.approx(100 * 6 * two.grr / 2.0)
