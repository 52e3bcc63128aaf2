"""Gauge study & test time: type 1 and gauge R&R, and how %GRR would change with test time.

Master-part runs come from the store (the master part is tested at every calibration: its
losses are repeated readings of one reference part at the station's test time) or from an
uploaded CSV (``value`` for a type 1 study; ``part``, ``operator``, ``value`` for R&R;
``loss_pa`` for test-time advice)."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import streamlit as st

from analytics import advise_test_time, grr_anova, grr_average_range, type1_study
from analytics.drift import project_drift
from dashboard import charts, data, tables
from dashboard.common import TEST_PARAMETER_NOTE, page, time_range
from dashboard.display import fmt

_SAMPLE = "part,operator,value\n" + "".join(
    f"P{p},{o},{0.1 * p + 0.01 * ((p * 7 + o_i * 3 + t) % 5):.3f}\n"
    for p in range(1, 6) for o_i, o in enumerate("AB") for t in range(2)
)  # fmt: skip

p = page("Gauge study & test time")
st.warning(TEST_PARAMETER_NOTE, icon=":material/warning:")
u = p.units
source = st.radio("Data", ["Master-part runs from the store", "Upload a CSV"], horizontal=True,
                  key="gauge_source")  # fmt: skip


_ANOVA = {"source": "Source of variation", "df": "Degrees of freedom",
          "ss": "Sum of squares [unit²]", "ms": "Mean square [unit²]", "f": "F ratio",
          "p": "p-value"}


def show_type1(values_disp: np.ndarray, reference: float, tolerance: float) -> None:
    try:
        t1 = type1_study(values_disp, reference, tolerance)
    except ValueError as exc:
        st.warning(f"No type 1 study: {exc}")
        return
    a, b, c, d = st.columns(4)
    a.metric("Cg (repeatability)", fmt(t1.cg))
    b.metric("Cgk (with bias)", fmt(t1.cgk))
    c.metric("Readings", t1.n)
    d.metric(f"Bias [{u.q_label}]", fmt(t1.bias), help=f"t-test p = {fmt(t1.bias_p)}")
    (st.success if t1.capable else st.warning)(t1.note)


def show_grr(df: pd.DataFrame, tolerance: float | None) -> None:
    for method, fn in (("ANOVA", grr_anova), ("average and range", grr_average_range)):
        try:
            r = fn(df, tolerance=tolerance)
        except ValueError as exc:
            st.warning(f"Gauge R&R ({method}): {exc}")
            continue
        st.markdown(f"**Gauge R&R, {method}**: {r.verdict}")
        a, b, c, d = st.columns(4)
        a.metric("%GRR (of total variation)", f"{r.pct_grr:.1f} %")
        b.metric(
            "%GRR of tolerance",
            "–" if r.pct_grr_tolerance is None else f"{r.pct_grr_tolerance:.1f} %",
        )
        c.metric("Distinct categories (ndc)", r.ndc)
        d.metric(f"Repeatability EV / reproducibility AV [{u.q_label}]",
                 f"{fmt(r.ev)} / {fmt(r.av)}")
        if r.anova:
            table = pd.DataFrame([row.to_dict() for row in r.anova])
            for col in ("ss", "ms", "f", "p"):  # the residual row has no F and no p
                table[col] = [
                    "–" if v is None or pd.isna(v) else format(float(v), ".4g")
                    for v in table[col]
                ]
            labels = {k: v.replace("unit", u.q_label) for k, v in _ANOVA.items()}
            tables.show(table.rename(columns=labels), key=f"gauge_anova_{method}")
        st.caption(r.note)


def show_advice(losses: np.ndarray, test_s: float, sens: float, reject: float,
                lower: float | None, target: float) -> None:  # fmt: skip
    try:
        adv = advise_test_time(losses, test_s, sens, reject, lower, target_pct=target)
    except ValueError as exc:
        st.warning(f"No test-time advice: {exc}")
        return
    a, b, c = st.columns(3)
    a.metric("%GRR now", f"{adv.current_pct_grr:.1f} %", help=f"at {adv.current_test_s:g} s")
    b.metric(
        "Shortest test time for target",
        "–" if adv.recommended_test_s is None else f"{adv.recommended_test_s:g} s",
    )
    c.metric(
        "Conservative (σ upper bound)",
        "–" if adv.conservative_test_s is None else f"{adv.conservative_test_s:g} s",
    )
    curve = pd.DataFrame([pt.to_dict() for pt in adv.curve])
    st.altair_chart(charts.advice_curve(curve, target, test_s), width="stretch")
    st.caption(f"Assumptions: {adv.assumptions}. {adv.note}")


if source.startswith("Master"):
    c1, c2, c3 = st.columns(3)
    with c1:
        station = st.selectbox("Station", list(p.stations["station"]), key="gauge_station")
    with c2:
        since, until = time_range(p, "gauge_range", "Last 30 days")
    cals = data.calibration_series(p.url, station, None, since, until)
    cals = cals[cals["passed"].astype(bool)]
    if cals.empty:
        st.info(f"{station} has no passed calibrations in this range: no master-part runs.")
        st.stop()
    with c3:
        program = st.selectbox("Program", sorted(cals["program"].unique()), key="gauge_program")
    cals = cals[cals["program"] == program]
    newest = data.results(p.url, station=station, program=program, limit=1, newest_first=True)
    if newest.empty:
        st.info(f"No results of {program} on {station}: test time and limits unknown.")
        st.stop()
    test_s = float(newest["test_s"].iloc[0])
    reject = float(newest["reject_limit_sccm"].iloc[0])
    lower_raw = newest["lower_limit_sccm"].iloc[0]
    lower = None if pd.isna(lower_raw) else float(lower_raw)
    losses = cals["master_loss_pa"].to_numpy(float)
    sens = float(np.median(cals["sensitivity"].to_numpy(float)))
    tolerance = reject - lower if lower is not None else reject
    st.caption(
        f"{len(losses)} master-part test(s) at {test_s:g} s; sensitivity "
        f"{fmt(sens * u.q_factor / u.p_factor)} {u.q_label}/{u.p_label}; "
        f"tolerance {fmt(u.q(tolerance))} {u.q_label}"
    )
    st.subheader("Type 1 study of the master part")
    readings = (losses - np.median(losses)) * sens * u.q_factor
    show_type1(readings, 0.0, tolerance * u.q_factor)
    st.caption(
        "Readings: master-part losses through the median sensitivity, against their own "
        "median as zero, so bias is not assessed here; Cg (repeatability) is."
    )
    st.subheader("Test-time advice")
    # the advice treats the master-part losses as repeats of one stable reading: a trend
    # (seal wear, a warming fixture) inflates their spread and the advice with it
    drift = project_drift(cals["ended_at"], losses, None)
    if drift.status == "drifting":
        st.warning(
            f"The master part's losses drift ({fmt(u.p(drift.slope_per_day))} {u.p_label} per "
            f"day, Theil–Sen trend whose 95 % interval excludes zero): their spread is not "
            "repeatability alone, so the advice below is not to be trusted as it is. Pick a "
            "range within one calibration epoch (after the last seal change or repair) or "
            "find the cause on the calibration page first.",
            icon=":material/trending_up:",
        )
    target = st.slider("Target %GRR", 5.0, 30.0, 10.0, 0.5, key="gauge_target")
    show_advice(losses, test_s, sens, reject, lower, target)
    st.caption("Gauge R&R needs several parts and operators: upload a study as a CSV.")
else:
    st.download_button("Example R&R layout (CSV)", _SAMPLE, "grr-example.csv", "text/csv")
    upload = st.file_uploader("CSV file", type=["csv"], key="gauge_upload")
    if upload is None:
        st.info(
            "Columns: `value` (type 1), `part`, `operator`, `value` (R&R) in the selected "
            "leak-rate unit, or `loss_pa` (test-time advice)."
        )
        st.stop()
    try:
        frame = pd.read_csv(io.BytesIO(upload.getvalue()))
    except (ValueError, UnicodeDecodeError) as exc:
        st.error(f"{upload.name}: not a readable CSV ({exc})")
        st.stop()
    st.dataframe(frame.head(20), hide_index=True, key="gauge_upload_preview")
    if len(frame) > 20:
        st.caption(f"The first 20 of {len(frame):,} rows; the study uses all of them.")
    a, b = st.columns(2)
    tol = a.number_input(f"Tolerance [{u.q_label}]", 0.0, 1e9, 2.0, key="gauge_tol")
    ref = b.number_input(f"Reference value [{u.q_label}]", -1e9, 1e9, 0.0, key="gauge_ref")
    if {"part", "operator", "value"} <= set(frame.columns):
        show_grr(frame, tol or None)
    elif "value" in frame.columns:
        show_type1(pd.to_numeric(frame["value"], errors="coerce").to_numpy(float), ref, tol)
    if "loss_pa" in frame.columns:
        c, d, e = st.columns(3)
        t0 = c.number_input("Current test time [s]", 0.1, 600.0, 10.0, key="gauge_t0")
        s0 = d.number_input("Sensitivity [sccm/Pa]", 0.0, 100.0, 0.05, format="%.5f",
                            key="gauge_s0")  # fmt: skip
        target = e.number_input("Target %GRR", 1.0, 50.0, 10.0, key="gauge_target_csv")
        st.caption("Uploaded losses carry no times, so a drift cannot be checked here: use "
                   "master-part runs from one stable period (one calibration epoch).")
        show_advice(pd.to_numeric(frame["loss_pa"], errors="coerce").to_numpy(float), t0, s0,
                    tol / u.q_factor, None, target)  # fmt: skip
    if not {"value", "loss_pa"} & set(frame.columns):
        st.error(f"{upload.name}: expected a `value` or `loss_pa` column, "
                 f"got {', '.join(map(str, frame.columns))}")  # fmt: skip
