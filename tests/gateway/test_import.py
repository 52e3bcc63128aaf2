"""``leakfleet import``: history files through the profile into the journal, idempotent and
resumable, bad lines quarantined, never a traceback."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.errors import ConfigError
from gateway.importer import import_file, state_path
from gateway.profiles import StationContext, load_profile
from gateway.store import open_journal

SAMPLE = Path(__file__).resolve().parents[2] / "gateway" / "profiles" / "samples" / "lf-delim.txt"


def _history(tmp_path: Path, copies: int) -> Path:
    """A long history: the sample's lines repeated with fresh cycle numbers and days."""
    lines = SAMPLE.read_text(encoding="utf-8").splitlines()
    out = []
    for k in range(copies):
        for line in lines:
            f = line.split(";")
            if f[0] == "R":
                f[1] = str(100000 + k * 100 + int(f[1]) % 100)
                f[2] = f"2026-{1 + k // 28:02d}-{1 + k % 28:02d}" + f[2][10:]
            elif f[0] == "C":
                f[1] = f"2026-{1 + k // 28:02d}-{1 + k % 28:02d}" + f[1][10:]
            out.append(";".join(f))
    path = tmp_path / "history.txt"
    path.write_text("\n".join(out) + "\n", encoding="utf-8")
    return path


def _counts(db: Path) -> tuple[int, int, int]:
    with sqlite3.connect(db) as c:
        return tuple(c.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0]  # type: ignore[return-value]
                     for t in ("results", "calibrations", "quarantine"))


def _import(path: Path, db: Path, **kw: object) -> object:
    profile = load_profile("lf-delim")
    ctx = StationContext(station="L9-S1", line="L9")
    with open_journal(f"sqlite:///{db}") as journal:
        return import_file(path, profile=profile, ctx=ctx, journal=journal,
                           state_file=state_path(db), **kw)  # type: ignore[arg-type]


def test_importing_twice_stores_nothing_twice(tmp_path: Path) -> None:
    history = _history(tmp_path, 30)
    db = tmp_path / "j.db"
    first = _import(history, db, lines_per_chunk=50)
    counts = _counts(db)
    assert counts[0] > 0 and counts[1] > 0 and counts[2] > 0  # the sample holds bad lines too
    again = _import(history, db, lines_per_chunk=50, restart=True)
    assert _counts(db) == counts
    assert again.stored == 0 and again.repeats == first.stored + first.quarantined  # type: ignore[attr-defined]


def test_an_interrupted_import_resumes_where_it_stopped(tmp_path: Path) -> None:
    history = _history(tmp_path, 30)
    whole = tmp_path / "whole.db"
    _import(history, whole, lines_per_chunk=40)

    class Stop(Exception):
        pass

    def stop_after_two(done: int, seen: list[int] = []) -> None:  # noqa: B006
        seen.append(done)
        if len(seen) == 2:
            raise Stop

    db = tmp_path / "j.db"
    with pytest.raises(Stop):
        _import(history, db, lines_per_chunk=40, progress=stop_after_two)
    partial = _counts(db)
    assert 0 < partial[0] < _counts(whole)[0]
    resumed = _import(history, db, lines_per_chunk=40)
    assert resumed.skipped_bytes > 0  # type: ignore[attr-defined]
    assert _counts(db) == _counts(whole)


def test_two_parsing_processes_store_the_same(tmp_path: Path) -> None:
    history = _history(tmp_path, 20)
    one, two = tmp_path / "one.db", tmp_path / "two.db"
    _import(history, one, lines_per_chunk=30)
    _import(history, two, lines_per_chunk=30, jobs=2)
    assert _counts(one) == _counts(two)


def test_a_register_profile_is_refused_with_a_reason(tmp_path: Path) -> None:
    profile = load_profile("lf-mbtcp")
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as journal, \
            pytest.raises(ConfigError, match="reads registers"):
        import_file(SAMPLE, profile=profile, ctx=StationContext(station="S", line="L"),
                    journal=journal, state_file=tmp_path / "s.json")


def test_cli_imports_and_reports_json(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    db = tmp_path / "j.db"
    code = main(["import", str(SAMPLE), "--profile", "lf-delim", "--station", "L9-S1",
                 "--line", "L9", "--store", f"sqlite:///{db}", "--json"])
    assert code == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["files"][0]["stored"] == 6 and doc["files"][0]["quarantined"] == 5


@pytest.mark.parametrize(("args", "message"), [
    (["/nonexistent/x.txt", "--profile", "lf-delim"], "no such file"),
    ([str(SAMPLE)], "give --config FILE"),
    ([str(SAMPLE), "--config", "demo"], "no station 'L9-S1'"),
    ([str(SAMPLE), "--profile", "lf-delim", "--jobs", "0"], "--jobs"),
])  # fmt: skip
def test_cli_errors_are_one_line(args: list[str], message: str, tmp_path: Path,
                                 capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["import", *args, "--station", "L9-S1", "--store", f"sqlite:///{tmp_path}/j.db"])
    err = capsys.readouterr().err
    assert code != 0 and message in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
