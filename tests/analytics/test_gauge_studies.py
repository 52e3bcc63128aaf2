"""Gauge R&R and type 1 studies against published worked examples and statsmodels."""

from __future__ import annotations

import math

import numpy as np
import pytest
from aiag_msa_example import tidy
from hypothesis import given, settings
from hypothesis import strategies as st

from analytics.gauge import (
    K1_TRIALS,
    K2_APPRAISERS,
    K3_PARTS,
    grr_anova,
    grr_average_range,
    type1_study,
)

pytestmark = pytest.mark.timeout(60)


def test_average_and_range_matches_aiag_msa_example() -> None:
    # AIAG MSA 4th ed. example as reproduced in McNeese (2015), "Three Ways to Analyze a Gage
    # R&R Study": EV 0.2019, AV 0.2297, GRR 0.3058, PV 1.1046, TV 1.1461, %GRR 26.68 %, ndc 5.
    r = grr_average_range(tidy())
    assert r.ev == pytest.approx(0.2019, abs=5e-5)
    assert r.av == pytest.approx(0.2297, abs=5e-5)
    assert r.grr == pytest.approx(0.3058, abs=5e-5)
    assert r.pv == pytest.approx(1.1046, abs=5e-5)
    assert r.tv == pytest.approx(1.1461, abs=5e-5)
    assert r.pct_grr == pytest.approx(26.68, abs=0.01)
    assert r.ndc == 5
    assert r.verdict.startswith("conditionally acceptable")


def test_anova_matches_aiag_msa_example() -> None:
    # Same source: the ANOVA method gives %GRR about 27.9 % with the part×operator interaction
    # not significant (p > 0.25, AIAG pooling rule) and pooled into repeatability.
    r = grr_anova(tidy())
    assert r.interaction_pooled is True
    assert r.interaction_p is not None and r.interaction_p > 0.25
    assert r.pct_grr == pytest.approx(27.9, abs=0.05)
    assert r.interaction == 0.0
    assert [row.source for row in r.anova] == [
        "part",
        "operator",
        "repeatability (pooled)",
        "total",
    ]


def test_anova_sums_of_squares_match_statsmodels() -> None:
    # Reference: statsmodels anova_lm on ols("value ~ C(part) * C(operator)") (type I = type II
    # for a balanced design).
    smf = pytest.importorskip("statsmodels.formula.api")
    sm = pytest.importorskip("statsmodels.api")
    data = tidy()
    ref = sm.stats.anova_lm(smf.ols("value ~ C(part) * C(operator)", data=data).fit())
    # Keep the interaction in the model so every row is comparable.
    r = grr_anova(data, pool_alpha=1.0)
    ours = {row.source: row for row in r.anova}
    assert ours["part"].ss == pytest.approx(ref.loc["C(part)", "sum_sq"], rel=1e-10)
    assert ours["operator"].ss == pytest.approx(ref.loc["C(operator)", "sum_sq"], rel=1e-10)
    assert ours["part x operator"].ss == pytest.approx(
        ref.loc["C(part):C(operator)", "sum_sq"], rel=1e-9
    )
    assert ours["repeatability"].ss == pytest.approx(ref.loc["Residual", "sum_sq"], rel=1e-10)
    assert ours["part x operator"].df == int(ref.loc["C(part):C(operator)", "df"])
    assert ours["part x operator"].p == pytest.approx(
        ref.loc["C(part):C(operator)", "PR(>F)"], rel=1e-8
    )


def test_grr_against_tolerance_uses_six_sigma() -> None:
    # AIAG MSA 4th ed.: %GRR of tolerance = 100 · 6·GRR / tolerance.
    r = grr_average_range(tidy(), tolerance=5.0)
    assert r.pct_grr_tolerance == pytest.approx(100 * 6 * r.grr / 5.0)


def _range_rms(m: int) -> float:
    """sqrt(E[W²]) of the range W of m standard normals, by numerical integration.

    P(W <= w) = m ∫ φ(x) (Φ(x+w) − Φ(x))^(m−1) dx and E[W²] = ∫ 2w P(W > w) dw, evaluated on a
    fine grid with scipy's normal functions.
    """
    from scipy import integrate, special

    x = np.linspace(-9.0, 9.0, 3001)
    w = np.linspace(0.0, 14.0, 1401)
    phi = np.exp(-0.5 * x**2) / math.sqrt(2 * math.pi)
    inner = phi[None, :] * (special.ndtr(x[None, :] + w[:, None]) - special.ndtr(x)[None, :]) ** (
        m - 1
    )
    cdf = m * integrate.trapezoid(inner, x, axis=1)
    return math.sqrt(integrate.trapezoid(2 * w * (1 - cdf), w))


def test_aiag_constants() -> None:
    # Values as tabulated in AIAG MSA 4th ed. (average-and-range method): K1 0.8862 (2 trials),
    # 0.5908 (3); K2 0.7071 (2 appraisers), 0.5231 (3); K3 0.3146 for 10 parts.
    assert K1_TRIALS[2] == 0.8862 and K1_TRIALS[3] == 0.5908
    assert K2_APPRAISERS[2] == 0.7071 and K2_APPRAISERS[3] == 0.5231
    assert K3_PARTS[10] == 0.3146
    # Independent check of K2/K3 = 1/d2*(m, g=1), with d2*(m, 1) = sqrt(E[W²]) = sqrt(d2² + d3²)
    # (Duncan, Quality Control and Industrial Statistics), integrated with scipy.
    for m in (2, 3, 5, 10):
        assert 1.0 / _range_rms(m) == pytest.approx(K3_PARTS[m], abs=2e-4)


def test_unbalanced_study_is_a_clear_error() -> None:
    data = tidy().iloc[1:]
    with pytest.raises(ValueError, match="balanced"):
        grr_anova(data)


@settings(max_examples=25, deadline=None)
@given(
    shift=st.floats(-100, 100),
    scale=st.floats(0.1, 100),
)
def test_grr_percentages_are_location_and_scale_invariant(shift: float, scale: float) -> None:
    base = tidy()
    moved = base.assign(value=base["value"] * scale + shift)
    for method in (grr_anova, grr_average_range):
        a, b = method(base), method(moved)
        assert b.pct_grr == pytest.approx(a.pct_grr, rel=1e-6)
        assert b.ndc == a.ndc
        assert b.grr == pytest.approx(a.grr * scale, rel=1e-6)


def test_type1_formulas() -> None:
    # Formulas: VDA 5 / Minitab "Methods and formulas for Type 1 Gage Study":
    # Cg = (0.2·T)/(6·s), Cgk = (0.1·T − |x̄ − x_ref|)/(3·s). No published worked example with its
    # raw data was found with the search tool, so this checks a hand calculation on a
    # constructed sample whose mean and s are exact.
    values = [10.0 + d for d in (-0.02, -0.01, 0.0, 0.01, 0.02) * 5]
    x = np.array(values)
    mean, s = x.mean(), x.std(ddof=1)
    r = type1_study(values, reference=10.005, tolerance=1.0)
    assert r.bias == pytest.approx(mean - 10.005)
    assert r.cg == pytest.approx(0.2 * 1.0 / (6 * s))
    assert r.cgk == pytest.approx((0.1 * 1.0 - 0.005) / (3 * s))
    assert r.capable is True
    assert r.n == 25


def test_type1_bias_test_against_scipy() -> None:
    # Reference: scipy.stats.ttest_1samp (the bias t-test of the type 1 study).
    from scipy import stats

    rng = np.random.default_rng(7)
    x = rng.normal(5.01, 0.01, 50)
    r = type1_study(x, reference=5.0, tolerance=0.5)
    ref = stats.ttest_1samp(x, 5.0)
    assert r.bias_t == pytest.approx(ref.statistic)
    assert r.bias_p == pytest.approx(ref.pvalue)


def test_type1_not_capable_when_biased() -> None:
    r = type1_study([1.0, 1.01, 0.99, 1.0, 1.02, 0.98], reference=0.9, tolerance=1.0)
    assert r.cgk < 1.33 and not r.capable
    assert "not capable" in r.note


def test_grr_to_dict_is_json() -> None:
    import json

    json.dumps(grr_anova(tidy()).to_dict(), allow_nan=False)
    json.dumps(grr_average_range(tidy()).to_dict(), allow_nan=False)
