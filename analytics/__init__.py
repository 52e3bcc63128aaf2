"""Statistics for leak-test data: pure functions over records and DataFrames, no I/O.

Every function takes canonical records or DataFrames with the canonical column names and
returns a frozen result dataclass with ``to_dict()`` for JSON. Nothing here reads a store, a
file or the clock; the CLI (``leakfleet report``) and the dashboard do that and call in.
"""

from analytics.advice import AdvicePoint, TestTimeAdvice, advise_test_time, grr_at
from analytics.audit import (
    LeakStandard,
    PartHistory,
    RetestReport,
    StandardStatus,
    add_months,
    flag_overdue_calibrations,
    part_history,
    retest_analysis,
    standard_drift,
    standards_due,
)
from analytics.capability import (
    CapabilityReport,
    Histogram,
    bissell_interval,
    capability,
    capability_from_summary,
    fixed_edges,
    guard_band_share,
    histogram,
    histogram_from_counts,
    ppm_above,
)
from analytics.drift import (
    Alarm,
    CalibrationHealth,
    ControlChart,
    DriftProjection,
    HealthConfig,
    baseline,
    calibration_health,
    cusum_chart,
    ewma_chart,
    project_drift,
)
from analytics.frames import calibrations_frame, results_frame
from analytics.gauge import GrrReport, Type1Report, grr_anova, grr_average_range, type1_study
from analytics.master import MasterSelection, qualify_master
from analytics.shift_report import ShiftReport, shift_report
from analytics.shifts import DEFAULT_SHIFTS, ShiftCalendar, ShiftWindow, counts_to_shifts
from analytics.yields import (
    ParetoReport,
    YieldReport,
    pareto,
    pareto_from_counts,
    yield_from_counts,
    yield_report,
)

__all__ = [
    "DEFAULT_SHIFTS",
    "AdvicePoint",
    "Alarm",
    "CalibrationHealth",
    "CapabilityReport",
    "ControlChart",
    "DriftProjection",
    "GrrReport",
    "HealthConfig",
    "Histogram",
    "LeakStandard",
    "MasterSelection",
    "ParetoReport",
    "PartHistory",
    "RetestReport",
    "ShiftCalendar",
    "ShiftReport",
    "ShiftWindow",
    "StandardStatus",
    "TestTimeAdvice",
    "Type1Report",
    "YieldReport",
    "add_months",
    "advise_test_time",
    "baseline",
    "bissell_interval",
    "calibration_health",
    "calibrations_frame",
    "capability",
    "capability_from_summary",
    "counts_to_shifts",
    "cusum_chart",
    "ewma_chart",
    "fixed_edges",
    "flag_overdue_calibrations",
    "grr_anova",
    "grr_at",
    "grr_average_range",
    "guard_band_share",
    "histogram",
    "histogram_from_counts",
    "pareto",
    "pareto_from_counts",
    "part_history",
    "ppm_above",
    "project_drift",
    "qualify_master",
    "results_frame",
    "retest_analysis",
    "shift_report",
    "standard_drift",
    "standards_due",
    "type1_study",
    "yield_from_counts",
    "yield_report",
]
