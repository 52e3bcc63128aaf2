"""A plant history in a journal, fast: months or years of results from a scenario's stations.

Not the live simulator (no pressure traces, no protocols): the same plant (stations, programs,
part populations, calibration intervals, seal wear) sampled with numpy and written straight into
the journal's documented schema (one column per canonical field, timestamps in microseconds),
with the result indexes dropped during the load and rebuilt after it, which is what makes
10 million results a matter of minutes. Serves the query benchmark and anyone who wants to see
the dashboard on a year of data.

Shape of the history: every station tests around the clock Monday to Saturday (three shifts)
and stands on Sundays; operators pause now and then; programs change in batches; a share of
rejected parts is tested again under the same part id; calibrations run every
``calibration_interval`` cycles of a program, the master part's loss creeping up with seal wear
until the seal is replaced. Record ids are the canonical ones (``TestResult.record_id``), so a
gateway re-reading the same cycles would be de-duplicated.
"""

from __future__ import annotations

import hashlib
import sqlite3
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from gateway.calibration import expected_loss_pa
from gateway.store.summaries import fold_results, rebuild_summaries
from sim.scenario import Population, Program, Scenario, Station, load_scenario
from sim.station import WINDOW_MIN

__all__ = ["BackfillStats", "backfill", "journal_path"]

US = 1_000_000
_WEEK_S = 7 * 86_400
_PRODUCTION_S = 6 * 86_400  # Monday 00:00 to Sunday 00:00
_VENT_S = 2.0
_CHUNK = 20_000  # results per station per chunk
_SEAL_LIFE = 4000  # cycles between seal replacements
_DEFAULT_POP = Population()
_PROFILE = {"lf-delim": "lf-delim@1.0", "lf-kv": "lf-kv@1.1", "lf-mbtcp": "lf-mbtcp@1.0",
            "lf-mbrtu": "lf-mbrtu@1.0"}


@dataclass(frozen=True)
class BackfillStats:
    results: int
    calibrations: int
    first: datetime
    last: datetime
    seconds: float


def journal_path(url: str) -> Path:
    """The file of a ``sqlite:///path`` journal URL (or a bare path)."""
    if url.startswith("sqlite:///"):
        return Path(url.removeprefix("sqlite:///"))
    if "://" in url:
        raise ValueError(f"backfill writes a SQLite journal (sqlite:///path.db), got {url!r}")
    return Path(url)


_blake = hashlib.blake2b


def _record_id(*parts: object) -> str:
    # the canonical id of gateway.records (stable hash of the unique key); tests pin equality
    return hashlib.blake2b("|".join(str(p) for p in parts).encode(), digest_size=12).hexdigest()


_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


def _iso_us(us: int) -> str:
    return (_EPOCH + timedelta(microseconds=us)).isoformat()


def _wall(production_s: np.ndarray) -> np.ndarray:
    """Production seconds since a Monday 00:00 → seconds since it, skipping Sundays."""
    weeks = np.floor(production_s / _PRODUCTION_S)
    return production_s + weeks * (_WEEK_S - _PRODUCTION_S)


class _StationStream:
    """One station's history, produced chunk by chunk (keeps memory flat for any size)."""

    def __init__(
        self, sc: Scenario, st: Station, rng: np.random.Generator, t0_us: int, offset_s: float
    ) -> None:
        self.sc, self.st, self.rng, self.t0_us = sc, st, rng, t0_us
        self.programs = [sc.programs[name] for name in st.programs.values()]
        # production seconds since the Monday 00:00 at t0_us; stations not in lockstep
        self.prod_s = offset_s + float(rng.uniform(0, 30))
        self.cycle = 0
        self.part_no = 0
        self.prev_retest = False
        self.prev_leak = 0.0
        self.since_cal = {p.name: p.calibration_interval for p in self.programs}  # due at start
        self.profile = _PROFILE.get(st.type, f"{st.type}@1.0")
        self.seal_changes: list[int] = []  # end times (µs) of the cycles the seal was replaced

    def chunk(self, n: int) -> tuple[list[tuple[Any, ...]], list[tuple[Any, ...]]]:
        st, rng, progs = self.st, self.rng, self.programs
        idx = np.arange(self.cycle, self.cycle + n)
        prog_i = (idx // max(1, st.batch_cycles)) % len(progs)

        def per_program(values: list[float]) -> np.ndarray:
            return np.array(values, dtype=float)[prog_i]

        body = (per_program([p.fill_s + p.stabilise_s + p.test_s for p in progs])
                + _VENT_S + rng.uniform(*st.load_s, n))
        dur = np.maximum(st.min_cycle_s, body)
        dur += np.where(rng.random(n) < st.pause_probability, rng.uniform(*st.pause_s, n), 0.0)
        prod = self.prod_s + np.cumsum(dur)
        self.prod_s = float(prod[-1])
        # stations stamp results to the second (their clocks' resolution)
        ended_s = self.t0_us // US + np.floor(_wall(prod)).astype(np.int64)
        ended_us = (ended_s * US).tolist()
        recv_us = (ended_s * US + rng.integers(40_000, 400_000, n)).tolist()
        isos = np.datetime_as_string(ended_s.astype("datetime64[s]"), unit="s").tolist()

        # the part population of each program, drawn for every cycle at once
        pops = [self.sc.populations.get(p.population) or _DEFAULT_POP for p in progs]
        limit = per_program([p.reject_limit_sccm for p in progs])
        gross_f = per_program([q.gross_fraction for q in pops])
        reject_f = per_program([q.reject_fraction for q in pops])
        u = rng.random(n)
        good = per_program([q.good_median_sccm for q in pops]) * np.exp(
            per_program([q.good_sigma for q in pops]) * rng.standard_normal(n))
        lo = per_program([q.reject_range[0] for q in pops])
        hi = per_program([q.reject_range[1] for q in pops])
        bad = limit * lo * (hi / lo) ** rng.random(n)
        glo = per_program([q.gross_sccm[0] for q in pops])
        ghi = per_program([q.gross_sccm[1] for q in pops])
        gross = glo * (ghi / glo) ** rng.random(n)
        true_leak = np.where(u < gross_f, gross, np.where(u < gross_f + reject_f, bad, good))
        # the part's temperature offset and transducer noise move the reading, not the part
        thermal = per_program([q.part_offset_mean_k for q in pops]) + per_program(
            [q.part_offset_sd_k for q in pops]) * rng.standard_normal(n)
        measured = np.round(true_leak + 0.04 * limit * rng.standard_normal(n)
                            + 0.08 * limit * thermal, 3).tolist()
        abort = (rng.random(n) < per_program([q.abort_fraction for q in pops])).tolist()
        retest = (rng.random(n) < per_program([q.retest_fraction for q in pops])).tolist()
        short = rng.uniform(0.2, 0.8, n).tolist()
        temperature = np.round(21.0 + thermal, 2).tolist()
        true_list = true_leak.tolist()
        spans = [expected_loss_pa(p.volume_m3, p.standard.flow_sccm, p.test_s) for p in progs]
        seal = (st.seal_leak_sccm + st.seal_wear_sccm * ((idx + 1) % _SEAL_LIFE) / 10).tolist()
        prog_list = prog_i.tolist()
        renewed = ((idx + 1) % _SEAL_LIFE == 0).tolist()

        results: list[tuple[Any, ...]] = []
        cals: list[tuple[Any, ...]] = []
        for j in range(n):
            k = prog_list[j]
            p = progs[k]
            self.cycle += 1
            cyc = self.cycle
            end = ended_us[j]
            per_pa = spans[k] / p.standard.flow_sccm
            master = 2.0 + seal[j] * per_pa
            if renewed[j]:  # the plant's maintenance log: the worn seal replaced here
                self.seal_changes.append(ended_us[j])
            self.since_cal[p.name] += 1
            if self.since_cal[p.name] > p.calibration_interval:
                self.since_cal[p.name] = 1
                cals.append(self._calibration(p, master, spans[k], end - 90 * US))
            if self.prev_retest:  # the same part again: same true leak, same id
                leak_true = self.prev_leak
            else:
                self.part_no += 1
                leak_true = true_list[j]
            lim = p.reject_limit_sccm
            pressure = p.test_pressure_pa
            loss: float | None
            leak: float | None
            if abort[j]:  # nothing was measured: no loss, no leak rate (absent, not zero)
                verdict, loss, leak, reason = "aborted", None, None, "cycle stopped by operator"
            elif leak_true > 100.0:
                verdict, loss, leak, reason = "gross", None, None, "test pressure not reached"
                pressure = round(pressure * short[j], 1)
            else:
                leak = round(measured[j] + (leak_true - true_list[j]), 3)
                loss = round(master + leak * per_pa, 1)
                low = p.lower_limit_sccm
                if leak > lim:
                    verdict, reason = "reject", "above reject limit"
                elif low is not None and leak < low:
                    verdict, reason = "reject", "below lower limit"
                else:
                    verdict, reason = "pass", ""
            self.prev_retest = verdict == "reject" and retest[j]
            self.prev_leak = leak_true
            part = p.part_id.format(s=st.name[-1], n=self.part_no) if p.part_id else None
            iso = isos[j]
            shown = "" if loss is None else f"{loss:.1f};{leak:.3f}"
            raw = (f"R;{cyc};{iso[:10]} {iso[11:]};{p.name};{part or ''};{verdict};"
                   f"{pressure / 1000:.2f};{shown or ';'};{lim:.3f}")
            results.append((
                _blake(f"result|{st.name}|{cyc}|{iso}+00:00".encode(), digest_size=12).hexdigest(),
                st.name, st.line, cyc, end,
                recv_us[j], p.name, verdict, pressure, loss, leak, lim,
                p.fill_s, p.stabilise_s, p.test_s, part, reason, p.lower_limit_sccm,
                temperature[j], None, raw, self.profile, None, "station", None,
            ))  # fmt: skip
        return results, cals

    def _calibration(
        self, p: Program, master_pa: float, span_pa: float, end: int
    ) -> tuple[Any, ...]:
        """Master part plain (the zero) and with the leak standard open (the span)."""
        rng = self.rng
        master = round(master_pa + float(rng.normal(0, 0.2)), 1)
        standard = round(master + span_pa * float(rng.normal(1.0, 0.01)), 1)
        # the ratio is undefined with no positive master loss: then the span is judged
        # against the loss noise (0.2 Pa here), as the live stations do (sim.station)
        ratio = standard / master if master > 0 else None
        passed = (ratio >= p.ratio_min if ratio is not None
                  else standard - master >= WINDOW_MIN * 0.2)
        why = (f"ratio {ratio:.2f} below {p.ratio_min:g}" if ratio is not None
               else f"span under {WINDOW_MIN:g} × the loss noise")
        sens = p.standard.flow_sccm / (standard - master)
        return (
            _record_id("calibration", self.st.name, p.name, _iso_us(end)), self.st.name,
            self.st.line, end, end + 200_000, p.name, master, standard, p.standard.flow_sccm,
            p.standard.reference_pressure_pa, None if ratio is None else round(ratio, 4), sens,
            int(passed), "" if passed else why, "", self.profile, "station", None,
        )  # fmt: skip


def _log_seal_changes(path: Path, streams: list[_StationStream], last_us: int,
                      epoch: datetime) -> None:
    """The maintenance log a plant would keep: every seal replacement, so the dashboard's
    calibration baselines restart there as they would on a real line."""
    from gateway.records import MaintenanceEvent
    from gateway.store import open_journal
    from gateway.store.logbook import Logbook

    with open_journal(str(path)) as journal:
        book = Logbook(journal)
        for s in streams:
            for at_us in s.seal_changes:
                if at_us <= last_us:
                    at = epoch + timedelta(microseconds=at_us)
                    book.add_maintenance(MaintenanceEvent(
                        s.st.name, at, "seal change", "fixture seal replaced (wear)",
                        "maintenance", at))  # fmt: skip


def _insert_sql(table: str, columns: tuple[str, ...]) -> str:
    cols = ("record_id", *columns)
    marks = ", ".join("?" * len(cols))
    return f"INSERT OR IGNORE INTO {table} ({', '.join(cols)}) VALUES ({marks})"


def backfill(
    url: str,
    results: int,
    *,
    scenario: str | Path | Scenario = "demo",
    end: datetime | None = None,
    seed: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> BackfillStats:
    """Write ``results`` results (and their calibrations) ending around ``end`` (default now)."""
    import time

    from gateway.store import open_journal
    from gateway.store.schema import CALIBRATION_COLUMNS, MIGRATIONS, RESULT_COLUMNS

    if results <= 0:
        raise ValueError(f"--results must be > 0, got {results}")
    started = time.perf_counter()
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    path = journal_path(url)
    open_journal(str(path)).close()  # schema and migrations through the journal itself
    rng = np.random.default_rng(sc.seed if seed is None else seed)
    stations = list(sc.stations)
    # each station's time per result, measured on a throwaway sample of its own cycles; the
    # results are shared out by rate, so every station's history ends at about ``end``
    means = []
    for st in stations:
        probe = _StationStream(sc, st, np.random.default_rng(0), 0, 0.0)
        probe.chunk(2000)
        means.append(probe.prod_s / 2000)
    rate = sum(1.0 / m for m in means)
    shares = [1.0 / m / rate for m in means]
    span_s = results / rate * _WEEK_S / _PRODUCTION_S
    end = end or datetime.now(UTC)
    t0 = end - timedelta(seconds=span_s)
    monday = (t0 - timedelta(days=t0.weekday())).replace(hour=0, minute=0, second=0,
                                                        microsecond=0)
    offset_s = min((t0 - monday).total_seconds(), _PRODUCTION_S - 1.0)  # a Sunday start: Monday
    t0_us = int(monday.timestamp()) * US
    streams = [_StationStream(sc, s, rng, t0_us, offset_s) for s in stations]

    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA synchronous=OFF")
    conn.execute("PRAGMA cache_size=-262144")
    statements = MIGRATIONS[0].statements
    indexes = [s for s in statements if s.startswith("CREATE INDEX ix_results")]
    # the journal keeps its summaries per batch; a bulk load folds them in once at the end
    empty = conn.execute("SELECT 1 FROM results LIMIT 1").fetchone() is None
    before_seq = conn.execute("SELECT COALESCE(MAX(seq), 0) FROM results").fetchone()[0]
    insert_r = _insert_sql("results", RESULT_COLUMNS)
    insert_c = _insert_sql("calibrations", CALIBRATION_COLUMNS)
    done = n_cal = 0
    first_us = last_us = 0
    try:
        for stmt in indexes:  # rebuilt after the load: much faster than maintaining them
            conn.execute(f"DROP INDEX IF EXISTS {stmt.split()[2]}")
        while done < results:
            rows: list[tuple[Any, ...]] = []
            cal_rows: list[tuple[Any, ...]] = []
            for s, share in zip(streams, shares, strict=True):
                r, c = s.chunk(max(1, round(_CHUNK * len(streams) * share)))
                rows += r
                cal_rows += c
            rows.sort(key=lambda r: r[5])  # journal order: as received
            if len(rows) > results - done:  # the last chunk: cut it, and its calibrations
                rows = rows[: results - done]
                cutoff = rows[-1][5]
                cal_rows = [c for c in cal_rows if c[3] <= cutoff]
            conn.execute("BEGIN")
            conn.executemany(insert_r, rows)
            conn.executemany(insert_c, cal_rows)
            conn.execute("COMMIT")
            first_us = first_us or rows[0][4]
            last_us = max(last_us, max(r[4] for r in rows))
            done += len(rows)
            n_cal += len(cal_rows)
            if progress is not None:
                progress(done, results)
    finally:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        conn.execute("BEGIN")
        for stmt in indexes:
            conn.execute(stmt.replace("CREATE INDEX", "CREATE INDEX IF NOT EXISTS", 1))
        if empty:
            rebuild_summaries(conn)
        else:
            fold_results(conn, before_seq)
        conn.execute("COMMIT")
        conn.execute("ANALYZE")
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        conn.close()
    epoch = datetime(1970, 1, 1, tzinfo=UTC)
    _log_seal_changes(path, streams, last_us, epoch)
    return BackfillStats(
        results=done, calibrations=n_cal, first=epoch + timedelta(microseconds=first_us),
        last=epoch + timedelta(microseconds=last_us),
        seconds=round(time.perf_counter() - started, 1),
    )


def progress_bar(stream: Any, width: int = 30) -> Callable[[int, int], None]:
    """A one-line progress bar (redrawn in place on a terminal, every 10 % otherwise)."""
    tty = hasattr(stream, "isatty") and stream.isatty()
    last = [-1]

    def show(done: int, total: int) -> None:
        frac = done / total if total else 1.0
        step = int(frac * 10)
        if not tty and step == last[0] and done < total:
            return
        last[0] = step
        bar = "#" * int(frac * width)
        text = f"backfill [{bar:<{width}}] {done:>11,}/{total:,} results {frac:6.1%}"
        stream.write(("\r" + text) if tty else text + "\n")
        if tty and done >= total:
            stream.write("\n")
        stream.flush()

    return show
