"""A station's behaviour over time: parts, cycles, calibrations, wear. Pure and deterministic.

``StationModel.next_activity()`` returns the next cycle or calibration as a timeline of states
plus the record the station publishes at the end of its test. The model owns one
``random.Random`` seeded from the scenario seed and the station name (physics and parts), and a
second one for faults, so switching faults on does not change which parts are made.

The station judges a part as a real one does: loss over the test time, leak rate from its own
current calibration (``gateway.calibration.Calibration``), verdict against the reject limit and
the optional lower limit. A calibration is two tests of the master part, plain and with the leak
standard open; it fails when the ratio is below the program's minimum, after which the seal is
replaced and the calibration repeated.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass, field
from datetime import UTC, datetime
from zoneinfo import ZoneInfo

from gateway.calibration import Calibration
from gateway.records import Verdict
from sim.physics import (
    TestConditions,
    TestOutcome,
    fill_pressure_pa,
    laminar_flow,
    simulate_test,
)
from sim.scenario import Faults, Population, Program, Scenario, Station
from sim.traces import SimTrace, trace_of_test

__all__ = ["WINDOW_MIN", "Activity", "Ambient", "SimCalibration", "SimResult", "StationModel"]

#: the smallest span, in loss-noise σ, a calibration with no positive master loss passes with
#: (common practice: a standard's signal well clear of a good part's scatter)
WINDOW_MIN = 10.0

VENT_S = 1.5
MASTER_LOAD_S = 8.0
MASTER_OFFSET_SD_K = 0.05  # the master part lives at the station: close to fixture temperature


@dataclass(frozen=True, slots=True)
class SimResult:
    """A result as the station computed it (unrounded, SI, gauge), plus the truth behind it."""

    station: str
    line: str
    cycle: int
    ended_at: datetime  # true time (UTC)
    station_time: datetime  # the station's clock at the end of test (UTC, maybe offset)
    program_no: int
    program: str
    part_id: str | None
    verdict: Verdict
    reason: str
    test_pressure_pa: float
    pressure_loss_pa: float
    leak_rate_sccm: float
    reject_limit_sccm: float
    lower_limit_sccm: float | None
    fill_s: float
    stabilise_s: float
    test_s: float
    temperature_c: float
    true_leak_sccm: float
    retest: bool = False


@dataclass(frozen=True, slots=True)
class SimCalibration:
    """A calibration event as the station computed it."""

    station: str
    line: str
    counter: int
    ended_at: datetime
    station_time: datetime
    program_no: int
    program: str
    master_loss_pa: float
    standard_loss_pa: float
    standard_sccm: float
    standard_ref_pressure_pa: float
    ratio: float | None  # None: undefined (master loss not above zero)
    sensitivity: float
    passed: bool
    reason: str
    standard_serial: str


@dataclass(frozen=True, slots=True)
class Activity:
    """One cycle or calibration: state changes (absolute sim time, s since epoch) and the record."""

    states: tuple[
        tuple[float, str], ...
    ]  # (time, state) with state in idle/fill/stabilise/test/vent/calibrating
    publish_at: float
    record: SimResult | SimCalibration
    ends_at: float  # the next activity starts here
    garbage: bool = False  # a garbage line goes out just before the record
    truncated: bool = False
    duplicate: bool = False
    torn: bool = False
    reset: bool = False  # the station was power-cycled just before this record (counter at 1)
    # curves the station sends after the record: (role, cycle, trace), role result/master/standard
    traces: tuple[tuple[str, int, SimTrace], ...] = ()


@dataclass(frozen=True, slots=True)
class Ambient:
    """Shop-floor temperature over the day: a smooth daily cycle in the plant's local time."""

    mean_c: float
    swing_k: float
    peak_hour: float
    tz: ZoneInfo

    def _phase(self, t: float) -> float:
        local = datetime.fromtimestamp(t, UTC).astimezone(self.tz)
        hour = local.hour + local.minute / 60 + local.second / 3600
        return 2 * math.pi * (hour - self.peak_hour) / 24

    def at(self, t: float) -> float:
        return self.mean_c + self.swing_k * math.cos(self._phase(t))

    def rate(self, t: float) -> float:
        """K/s: how fast the fixture is warming (+) or cooling (−) right now."""
        return -self.swing_k * math.sin(self._phase(t)) * 2 * math.pi / 86400


@dataclass
class _Part:
    part_id: str | None
    true_leak_sccm: float
    kind: str  # good/reject/gross
    retested: bool = False
    volume_factor: float = 1.0  # this part's volume against the program's (the master's)


@dataclass
class _ProgramState:
    calibration: Calibration | None = None
    cycles_since_calibration: int = 0
    serial: int = 0


@dataclass
class _State:
    t: float
    cycle: int = 0
    results: int = 0  # results so far (a reset does not count them again)
    calibrations: int = 0
    seal_cycles: int = 0
    program_index: int = 0
    batch_count: int = 0
    programs: dict[int, _ProgramState] = field(default_factory=dict)
    retest: _Part | None = None
    recalibrate: bool = False
    failed_calibrations: int = 0
    last_result: float = -math.inf


class StationModel:
    """Deterministic generator of a station's activities from a scenario and a start time."""

    def __init__(self, scenario: Scenario, station: Station, start: datetime) -> None:
        self.scenario = scenario
        self.station = station
        self.faults = station.faults if scenario.faults_enabled else Faults()
        self.index = [s.name for s in scenario.stations].index(station.name) + 1
        self.rng = random.Random(f"{scenario.seed}:{station.name}")
        self.fault_rng = random.Random(f"{scenario.seed}:{station.name}:faults")
        # curves draw their sample noise apart, so sending traces changes no result; the same
        # for parts' volume scatter, so a scenario without it keeps every result it had
        self.trace_rng = random.Random(f"{scenario.seed}:{station.name}:traces")
        self.volume_rng = random.Random(f"{scenario.seed}:{station.name}:volumes")
        self.ambient = Ambient(
            scenario.ambient_mean_c,
            scenario.ambient_swing_k,
            scenario.ambient_peak_hour,
            ZoneInfo(scenario.timezone),
        )
        self.epoch = start.timestamp()
        self.numbers = sorted(station.programs)
        self.state = _State(t=self.epoch, programs={n: _ProgramState() for n in self.numbers},
                            cycle=station.first_cycle - 1)

    # -- helpers ---------------------------------------------------------------------------
    def _program(self, number: int) -> Program:
        return self.scenario.programs[self.station.programs[number]]

    def _population(self, program: Program) -> Population:
        return self.scenario.populations[program.population]

    def _clock(self, t: float) -> datetime:
        return datetime.fromtimestamp(t + self.faults.clock_offset_s, UTC)

    def seal_leak_sccm(self) -> float:
        return self.station.seal_leak_sccm + self.station.seal_wear_sccm * self.state.seal_cycles

    def link_down(self, t: float) -> bool:
        """Whether the station's link is down at sim time ``t`` (periodic link-drop fault)."""
        every = self.faults.link_drop_every_s
        if not every:
            return False
        elapsed = t - self.epoch
        if elapsed < every:
            return False
        return (elapsed % every) < self.faults.link_drop_down_s

    def _conditions(
        self, program: Program, t: float, leak: float, part_offset: float,
        volume_factor: float = 1.0,
    ) -> TestConditions:
        return TestConditions(
            volume_m3=program.volume_m3 * volume_factor,
            test_pressure_pa=program.test_pressure_pa,
            stabilise_s=program.stabilise_s,
            test_s=program.test_s,
            leak_sccm=leak,
            fixture_c=self.ambient.at(t),
            ambient_rate_k_per_s=self.ambient.rate(t),
            fill_heating_k=program.fill_heating_k * self.rng.uniform(0.95, 1.05),
            thermal_tau_s=program.thermal_tau_s,
            part_offset_k=part_offset,
            part_tau_s=program.part_tau_s,
            noise_pa=self.station.noise_pa,
            resolution_pa=self.station.resolution_pa,
        )

    def _test(
        self, program: Program, t: float, leak: float, part_offset: float,
        volume_factor: float = 1.0,
    ) -> tuple[TestOutcome, SimTrace | None]:
        """One test from the end of fill at ``t``, and its curve when the station sends one."""
        c = self._conditions(program, t, leak, part_offset, volume_factor)
        outcome = simulate_test(c, self.rng)
        if not self.station.trace_interval_s:
            return outcome, None
        return outcome, trace_of_test(c, outcome, fill_s=program.fill_s,
                                      interval_s=self.station.trace_interval_s,
                                      rng=self.trace_rng)

    def _record_faults(self) -> dict[str, bool]:
        f, r = self.faults, self.fault_rng
        return {
            "garbage": f.garbage > 0 and r.random() < f.garbage,
            "truncated": f.truncated > 0 and r.random() < f.truncated,
            "duplicate": f.duplicate > 0 and r.random() < f.duplicate,
            "torn": f.torn_probability > 0 and r.random() < f.torn_probability,
        }

    # -- activities -------------------------------------------------------------------------
    def next_activity(self) -> Activity:
        s = self.state
        number = self.numbers[s.program_index]
        ps = s.programs[number]
        program = self._program(number)
        if (
            s.recalibrate
            or ps.calibration is None
            or ps.cycles_since_calibration >= program.calibration_interval
        ):
            return self._calibrate(number)
        return self._cycle(number)

    def _calibrate(self, number: int) -> Activity:
        s = self.state
        program = self._program(number)
        ps = s.programs[number]
        t0 = s.t
        leak_seal = self.seal_leak_sccm()
        std = program.standard
        # the standard is rated at its reference pressure; laminar flow at the test pressure
        std_flow = laminar_flow(
            std.flow_sccm, std.reference_pressure_pa, program.test_pressure_pa + 101_325.0
        )
        cycle_s = program.fill_s + program.stabilise_s + program.test_s + VENT_S
        t_fill1 = t0 + MASTER_LOAD_S
        master_test, master_trace = self._test(
            program, t_fill1 + program.fill_s, leak_seal, self.rng.gauss(0, MASTER_OFFSET_SD_K)
        )
        t_fill2 = t_fill1 + cycle_s
        standard_test, standard_trace = self._test(
            program,
            t_fill2 + program.fill_s,
            leak_seal + std_flow,
            self.rng.gauss(0, MASTER_OFFSET_SD_K),
        )
        master, standard = master_test.loss_pa, standard_test.loss_pa
        curves = tuple((role, s.cycle, tr) for role, tr in
                       (("master", master_trace), ("standard", standard_trace)) if tr is not None)
        ended = t_fill2 + program.fill_s + program.stabilise_s + program.test_s
        # the ratio is undefined when the master loss is not above zero (gateway.calibration):
        # then the window is judged by the span against the loss noise instead
        ratio = standard / master if master > 0 else None
        if ratio is not None:
            passed = standard > master and ratio >= program.ratio_min
        else:
            passed = standard - master >= WINDOW_MIN * max(self.station.noise_pa, 1e-9)
        if passed:
            cal = Calibration(master, standard, std.flow_sccm)
            ps.calibration = cal
            ps.cycles_since_calibration = 0
            sensitivity = cal.sensitivity
            reason = ""
            s.recalibrate = False
            s.failed_calibrations = 0
        else:
            span = standard - master
            sensitivity = std.flow_sccm / span if span > 0 else 0.0
            reason = (f"ratio {ratio:.3f} below minimum {program.ratio_min:.3f}"
                      if ratio is not None else
                      f"span {standard - master:.1f} Pa under {WINDOW_MIN:g} × the loss noise")
            # maintenance replaces the worn seal, then the station calibrates once more
            s.seal_cycles = 0
            s.failed_calibrations += 1
            s.recalibrate = s.failed_calibrations < 2
            if not s.recalibrate:
                s.failed_calibrations = 0
                if ps.calibration is None and standard > master:
                    ps.calibration = Calibration(master, standard, std.flow_sccm)
                ps.cycles_since_calibration = 0
        s.calibrations += 1
        record = SimCalibration(
            station=self.station.name,
            line=self.station.line,
            counter=s.calibrations,
            ended_at=datetime.fromtimestamp(ended, UTC),
            station_time=self._clock(ended),
            program_no=number,
            program=program.name,
            master_loss_pa=master,
            standard_loss_pa=standard,
            standard_sccm=std.flow_sccm,
            standard_ref_pressure_pa=std.reference_pressure_pa,
            ratio=ratio,
            sensitivity=sensitivity,
            passed=passed,
            reason=reason,
            standard_serial=std.serial,
        )
        ends = ended + VENT_S
        s.t = ends
        return Activity(
            states=((t0, "calibrating"), (ends, "idle")),
            publish_at=ended,
            record=record,
            ends_at=ends,
            traces=curves,
            **self._record_faults(),
        )

    def _new_part(self, program: Program, ps: _ProgramState) -> _Part:
        part = self._drawn_part(program, ps)
        if program.volume_scatter > 0:
            part.volume_factor = max(0.5, 1.0 + self.volume_rng.gauss(0.0,
                                                                      program.volume_scatter))
        return part

    def _drawn_part(self, program: Program, ps: _ProgramState) -> _Part:
        pop = self._population(program)
        ps.serial += 1
        part_id = program.part_id.format(n=ps.serial, s=self.index) if program.part_id else None
        u = self.rng.random()
        if u < pop.gross_fraction:
            lo, hi = pop.gross_sccm
            return _Part(part_id, math.exp(self.rng.uniform(math.log(lo), math.log(hi))), "gross")
        if u < pop.gross_fraction + pop.reject_fraction:
            lo, hi = pop.reject_range
            factor = math.exp(self.rng.uniform(math.log(lo), math.log(hi)))
            return _Part(part_id, factor * program.reject_limit_sccm, "reject")
        median = pop.good_median_sccm
        return _Part(part_id, self.rng.lognormvariate(math.log(median), pop.good_sigma), "good")

    def _cycle(self, number: int) -> Activity:
        s = self.state
        program = self._program(number)
        ps = s.programs[number]
        pop = self._population(program)
        assert ps.calibration is not None
        load = self.rng.uniform(*self.station.load_s)
        if self.rng.random() < self.station.pause_probability:
            load += self.rng.uniform(*self.station.pause_s)
        retest = s.retest is not None
        part = s.retest if s.retest is not None else self._new_part(program, ps)
        s.retest = None
        offset = self.rng.gauss(pop.part_offset_mean_k, pop.part_offset_sd_k)
        if retest:
            offset *= 0.5  # it waited at the station a while
        leak_total = part.true_leak_sccm + self.seal_leak_sccm()
        reached = fill_pressure_pa(program.test_pressure_pa, leak_total, program.fill_capacity_sccm)
        aborted = self.rng.random() < pop.abort_fraction
        gross = not aborted and reached < program.test_pressure_pa * (1 - program.fill_tolerance)
        stop_fraction = self.rng.uniform(0.2, 0.95) if aborted else 1.0
        run_s = program.fill_s + program.stabilise_s + program.test_s
        until_end = program.fill_s if gross else stop_fraction * run_s
        # clamping, venting and unloading give results a floor in spacing, gross/aborted too
        load = max(load, s.last_result + self.station.min_cycle_s - s.t - until_end)
        t_fill = s.t + load
        t_stab = t_fill + program.fill_s
        t_test = t_stab + program.stabilise_s
        t_end = t_test + program.test_s
        states: list[tuple[float, str]] = [(s.t, "idle"), (t_fill, "fill")]
        loss = 0.0
        leak = 0.0
        pressure = reached
        trace: SimTrace | None = None
        reason = ""
        if aborted:
            stop = t_fill + until_end
            states += [(t, n) for t, n in ((t_stab, "stabilise"), (t_test, "test")) if t < stop]
            ended = stop
            verdict = Verdict.ABORTED
            reason = "stopped by the operator"
            if stop < t_stab:
                pressure = reached * (stop - t_fill) / program.fill_s
        elif gross:
            ended = t_stab
            verdict = Verdict.GROSS
            reason = "test pressure not reached"
        else:
            states += [(t_stab, "stabilise"), (t_test, "test")]
            ended = t_end
            outcome, trace = self._test(program, t_stab, leak_total, offset, part.volume_factor)
            loss = outcome.loss_pa
            pressure = outcome.pressure_at_test_start_pa
            leak = ps.calibration.leak_rate(loss)
            if leak > program.reject_limit_sccm:
                verdict, reason = Verdict.REJECT, "leak above the reject limit"
            elif program.lower_limit_sccm is not None and leak < program.lower_limit_sccm:
                verdict, reason = Verdict.REJECT, "leak below the lower limit"
            else:
                verdict = Verdict.PASS
        if (
            verdict is Verdict.REJECT
            and not part.retested
            and self.rng.random() < pop.retest_fraction
        ):
            part.retested = True
            s.retest = part
        reset = bool(self.faults.reset_after) and s.results == self.faults.reset_after
        if reset:
            s.cycle = 0  # power-cycled: the counter starts again
        s.cycle += 1
        s.results += 1
        s.seal_cycles += 1
        ps.cycles_since_calibration += 1
        s.batch_count += 1
        if (
            s.batch_count >= self.station.batch_cycles
            and len(self.numbers) > 1
            and s.retest is None
        ):
            s.batch_count = 0
            s.program_index = (s.program_index + 1) % len(self.numbers)
        part_temp = self.ambient.at(ended) + offset * math.exp(
            -(ended - t_stab) / program.part_tau_s
        )
        record = SimResult(
            station=self.station.name,
            line=self.station.line,
            cycle=s.cycle,
            ended_at=datetime.fromtimestamp(ended, UTC),
            station_time=self._clock(ended),
            program_no=number,
            program=program.name,
            part_id=part.part_id,
            verdict=verdict,
            reason=reason,
            test_pressure_pa=pressure,
            pressure_loss_pa=loss,
            leak_rate_sccm=leak,
            reject_limit_sccm=program.reject_limit_sccm,
            lower_limit_sccm=program.lower_limit_sccm,
            fill_s=program.fill_s,
            stabilise_s=program.stabilise_s,
            test_s=program.test_s,
            temperature_c=part_temp,
            true_leak_sccm=part.true_leak_sccm,
            retest=retest,
        )
        ends = ended + VENT_S
        s.last_result = ended
        states.append((ended, "vent"))
        states.append((ended + VENT_S, "idle"))
        s.t = ends
        return Activity(
            states=tuple(states),
            publish_at=ended,
            record=record,
            ends_at=ends,
            reset=reset,
            traces=(("result", s.cycle, trace),) if trace is not None else (),
            **self._record_faults(),
        )

    def activities(self, count: int) -> list[Activity]:
        return [self.next_activity() for _ in range(count)]


def start_time(scenario: Scenario, now: datetime | None = None) -> datetime:
    """The simulated start: the scenario's, or now truncated to the second."""
    if scenario.start is not None:
        return scenario.start.astimezone(UTC)
    return (now or datetime.now(UTC)).replace(microsecond=0)
