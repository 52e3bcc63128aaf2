"""`leakfleet report --store sqlite:///…` on a real journal equals the in-memory reference.

The journal is written with the store's own writer (``open_journal``) and read back through
``open_store``; every report kind must give the same JSON as the in-memory stand-in built from
the same records. Skips while the store package is not part of this build.
"""

from __future__ import annotations

import dataclasses
import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from fake_store import demo_records, demo_store

from gateway.cli import build_parser, main
from gateway.reports import build_report, filters_from

store_pkg = pytest.importorskip("gateway.store", reason="the store package has not landed yet")
pytestmark = pytest.mark.timeout(120)

KINDS = [
    ["yield", "--by", "station,shift", "--timezone", "Europe/Berlin"],
    ["capability", "--by-station"],
    ["calibration", "--min-ratio", "2.5", "--master-loss-limit", "40Pa"],
    ["grr"],
    ["type1", "--part", "M-A", "--reference", "-0.3"],
    ["advise", "--station", "L1-S2"],
    ["master", "--parts", "M-A,M-B,M-C"],
    ["part", "HX210-0013"],
    ["retests", "--by", "station,shift"],
]
WINDOW = ["--since", "2026-01-01", "--until", "2026-04-01"]


@pytest.fixture(scope="module")
def journal_url(tmp_path_factory: pytest.TempPathFactory) -> str:
    path = tmp_path_factory.mktemp("journal") / "leakfleet.db"
    url = f"sqlite:///{path}"
    results, cals = demo_records()
    journal = store_pkg.open_journal(url)
    try:
        stats = journal.write([*results, *cals])
    finally:
        journal.close()
    assert stats.inserted == len(results) + len(cals)
    return url


def _normalise(doc: dict) -> dict:  # type: ignore[type-arg]
    """Round floats so the SQLite round trip (REAL columns) compares equal."""
    text = json.dumps(doc["result"], sort_keys=True)
    return json.loads(text, parse_float=lambda s: round(float(s), 9))


@pytest.mark.parametrize("argv", KINDS, ids=[k[0] for k in KINDS])
def test_report_from_sqlite_matches_reference(
    argv: list[str], journal_url: str, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["report", *argv, *WINDOW, "--store", journal_url, "--json"]) == 0
    real = json.loads(capsys.readouterr().out)
    args = build_parser().parse_args(["report", *argv, *WINDOW])
    reference = build_report(args.report_kind, args, store=demo_store()).document()
    assert _normalise(real) == _normalise(reference)


def test_missing_store_file_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["report", "yield", "--store", f"sqlite:///{tmp_path}/nope/none.db"])
    err = capsys.readouterr().err
    assert code == 2 and "error:" in err and "Traceback" not in err


def _ahead_journal(path: Path, now: datetime) -> str:
    """Three results an hour ago and two stamped two days ahead (a simulator at --speed), plus
    one calibration ahead of those."""
    url = f"sqlite:///{path}"
    results, cals = demo_records()
    shifted = [
        dataclasses.replace(r, ended_at=now + offset, received_at=now + offset)
        for r, offset in zip(
            results,
            [-timedelta(hours=1, minutes=m) for m in range(3)]
            + [timedelta(days=2), timedelta(days=2, minutes=5)],
            strict=False,
        )
    ]
    cal = dataclasses.replace(cals[0], ended_at=now + timedelta(days=2, minutes=9),
                              received_at=now + timedelta(days=2, minutes=9))  # fmt: skip
    journal = store_pkg.open_journal(url)
    try:
        journal.write([*shifted, cal])
    finally:
        journal.close()
    return url


def test_default_until_reaches_records_ahead_of_the_clock(tmp_path: Path) -> None:
    now = datetime(2026, 3, 2, 12, 0, tzinfo=UTC)
    url = _ahead_journal(tmp_path / "ahead.db", now)
    store = store_pkg.open_store(url)
    try:
        args = build_parser().parse_args(["report", "yield"])
        f = filters_from(args, now=now, get_store=lambda: store)
        # the newest record (the calibration) is inside the half-open range, by 1 µs
        assert f.until == now + timedelta(days=2, minutes=9, microseconds=1)
        assert len(store.results(f.since, f.until)) == 5
        assert len(store.calibrations(f.since, f.until)) == 1
        # an explicit --until is taken as given
        args = build_parser().parse_args(["report", "yield", "--until", now.isoformat()])
        assert filters_from(args, now=now, get_store=lambda: store).until == now
        # "now" stays the end when every record is older
        later = now + timedelta(days=3)
        args = build_parser().parse_args(["report", "yield"])
        assert filters_from(args, now=later, get_store=lambda: store).until == later
    finally:
        store.close()


def test_report_cli_counts_the_results_ahead(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    now = datetime.now(UTC)
    url = _ahead_journal(tmp_path / "ahead.db", now)
    assert main(["report", "yield", "--store", url, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["result"]["yield"]["overall"]["tests"] == 5
    assert datetime.fromisoformat(doc["filters"]["until"]) > now + timedelta(days=2)
    # with the range ending now, as before, the two results ahead are left out
    assert main(["report", "yield", "--store", url, "--until", now.isoformat(), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["result"]["yield"]["overall"]["tests"] == 3


def test_until_help_says_where_the_default_end_is() -> None:
    report = next(a for a in build_parser()._actions if a.dest == "command")
    yield_parser = report.choices["report"]._actions[-1].choices["yield"]  # type: ignore[union-attr]
    help_text = next(a.help for a in yield_parser._actions if a.dest == "until")
    assert "newest" in str(help_text) and "now" in str(help_text)
