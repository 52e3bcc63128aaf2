"""leakfleet gateway: canonical records, units, calibration math, profiles, drivers, journal."""

__version__ = "0.1.0"
