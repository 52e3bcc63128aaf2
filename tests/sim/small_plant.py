"""A small plant for the simulator's own tests: one station of each type, free ports."""

from __future__ import annotations

from datetime import UTC, datetime

START = datetime(2026, 12, 2, 6, 0, tzinfo=UTC)

# One station of each type, ports 0 (the OS picks); faults appended per test.
BASE = """
site = "Test Plant"
timezone = "Europe/Berlin"
seed = 4242
start = "2026-12-02T07:00:00"

[lines.L1]
name = "Housings"

[programs.HX-210]
volume = "250 cc"
test_pressure = "350 kPa"
fill = "3 s"
stabilise = "8 s"
test = "10 s"
reject_limit = "2 sccm"
lower_limit = "-1 sccm"
standard = { serial = "LS-1", flow = "3 sccm", reference_pressure = "350 kPa" }
calibration_interval = 10
part_id = "HX-{n:05d}"

[[stations]]
name = "D1"
line = "L1"
type = "lf-delim"
port = 0
programs = ["HX-210"]
load = ["2 s", "3 s"]
pause_probability = 0.0

[[stations]]
name = "K1"
line = "L1"
type = "lf-kv"
programs = ["HX-210"]
load = ["2 s", "3 s"]
pause_probability = 0.0

[[stations]]
name = "T1"
line = "L1"
type = "lf-mbtcp"
port = 0
programs = { 3 = "HX-210" }
load = ["2 s", "3 s"]
pause_probability = 0.0

[[stations]]
name = "R1"
line = "L1"
type = "lf-mbrtu"
programs = { 2 = "HX-210" }
load = ["2 s", "3 s"]
pause_probability = 0.0
"""
