"""Statistics for leak-test data: pure functions over records and DataFrames, no I/O.

Every function takes canonical records or DataFrames with the canonical column names and
returns a frozen result dataclass with ``to_dict()`` for JSON. Nothing here reads a store, a
file or the clock; the CLI (``leakfleet report``) and the dashboard do that and call in.
"""

from analytics.advice import AdvicePoint, TestTimeAdvice, advise_test_time, grr_at
from analytics.capability import (
    CapabilityReport,
    Histogram,
    bissell_interval,
    capability,
    capability_from_summary,
    guard_band_share,
    histogram,
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
    "MasterSelection",
    "ParetoReport",
    "ShiftCalendar",
    "ShiftWindow",
    "TestTimeAdvice",
    "Type1Report",
    "YieldReport",
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
    "grr_anova",
    "grr_at",
    "grr_average_range",
    "guard_band_share",
    "histogram",
    "pareto",
    "pareto_from_counts",
    "ppm_above",
    "project_drift",
    "qualify_master",
    "results_frame",
    "type1_study",
    "yield_from_counts",
    "yield_report",
]
