"""`leakfleet report`: every kind on a store-shaped input and on CSV files; bad input exits 2."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
from aiag_msa_example import tidy
from fake_store import demo_store

from gateway.cli import build_parser, main
from gateway.reports import build_report, read_tidy_csv

pytestmark = pytest.mark.timeout(120)


def _run(argv: list[str], store=None):  # type: ignore[no-untyped-def]
    args = build_parser().parse_args(["report", *argv])
    return build_report(args.report_kind, args, store=store)


@pytest.mark.parametrize(
    "argv",
    [
        ["yield", "--by", "station,shift", "--timezone", "Europe/Berlin"],
        ["yield", "--by", "part", "--pareto", "verdict"],
        ["capability"],
        ["capability", "--by-station", "--guard-band", "0.2sccm", "--bins", "20"],
        ["calibration", "--min-ratio", "2.5", "--master-loss-limit", "40Pa"],
        ["grr"],
        ["type1", "--part", "M-A", "--reference", "-0.3"],
        ["advise", "--station", "L1-S2"],
        ["master", "--parts", "M-A,M-B,M-C"],
    ],
)
def test_every_kind_from_a_store(argv: list[str]) -> None:
    report = _run(argv, store=demo_store())
    doc = report.document()
    json.dumps(doc, allow_nan=False)
    assert doc["schema"] == 1 and doc["kind"] == argv[0]
    assert report.text.strip()


def test_yield_from_store_counts_retests() -> None:
    result = _run(["yield", "--by", "station"], store=demo_store()).result
    overall = result["yield"]["overall"]
    assert overall["retested_parts"] >= 4  # parts 3, 13, 23, 33 were rejected and retested
    assert result["yield"]["basis"] == "mixed"  # three tests carry no part id


def test_calibration_from_store_flags_the_creeping_station() -> None:
    result = _run(["calibration", "--master-loss-limit", "40"], store=demo_store()).result
    by = {s["station"]: s for s in result["series"]}
    assert by["L1-S2"]["projection"]["status"] in ("reaches limit", "at limit")
    assert by["L1-S1"]["projection"]["status"] == "no drift"
    assert any(a["station"] == "L1-S2" and a["kind"] in ("ewma", "cusum") for a in result["alarms"])


def test_master_from_store_picks_lowest_tight_part() -> None:
    result = _run(["master", "--parts", "M-A,M-B,M-C"], store=demo_store()).result
    assert result["chosen"] == "M-B"


def test_grr_csv_matches_the_aiag_example(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # AIAG MSA 4th ed. example (McNeese 2015): %GRR 26.68 % by average and range.
    path = tmp_path / "grr.csv"
    tidy()[["part", "operator", "value"]].to_csv(path, index=False)
    assert main(["report", "grr", "--input", str(path), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["result"]["average_range"]["pct_grr"] == pytest.approx(26.68, abs=0.01)
    assert doc["result"]["anova"]["interaction_pooled"] is True
    assert main(["report", "grr", "--input", str(path), "--tolerance", "8"]) == 0
    assert "26.68 %" in capsys.readouterr().out


def test_type1_and_master_and_advise_csv(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    t1 = tmp_path / "t1.csv"
    t1.write_text("value\n" + "\n".join(str(10 + d / 1000) for d in range(-5, 6)) + "\n")
    assert main(["report", "type1", "--input", str(t1), "--reference", "10",
                 "--tolerance", "1", "--json"]) == 0  # fmt: skip
    assert json.loads(capsys.readouterr().out)["result"]["capable"] is True
    m = tmp_path / "m.csv"
    m.write_text("part,value\nA,-0.3\nA,-0.31\nA,-0.29\nB,-0.4\nB,-0.41\nB,-0.39\n")
    assert main(["report", "master", "--input", str(m), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["result"]["chosen"] == "B"
    a = tmp_path / "a.csv"
    a.write_text("loss\n12.1\n11.9\n12.3\n11.7\n12.0\n")
    argv = ["report", "advise", "--input", str(a), "--test-time", "4s", "--sensitivity", "0.05",
            "--reject-limit", "2sccm"]  # fmt: skip
    assert main(argv) == 0
    assert "shortest test time" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("content", "expected"),
    [
        ("part,operator,value\n1,A,0.5\n1,A,abc\n", "bad.csv:3: column 'value': expected a number"),
        ("part,value\n1,0.5\n", "bad.csv:1: missing column(s) 'operator'"),
        ("", "bad.csv: empty file"),
        ("part,operator,value\n1,,0.5\n", "bad.csv:2: column 'operator': empty value"),
        ("part,operator,value\n", "bad.csv: no data rows"),
        ("part,operator,value\n1,A,nan\n", "expected a finite number"),
    ],
)
def test_bad_csv_is_one_clear_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], content: str, expected: str
) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(content)
    assert main(["report", "grr", "--input", str(path)]) == 2
    err = capsys.readouterr().err
    assert expected in err and "Traceback" not in err and len(err.strip().splitlines()) == 1


_OPTIONS = {
    "grr": [],
    "master": [],
    "type1": ["--reference", "1", "--tolerance", "1"],
    "advise": ["--test-time", "4s", "--sensitivity", "0.05", "--reject-limit", "2sccm"],
}


@pytest.mark.parametrize("kind", list(_OPTIONS))
def test_missing_input_file_is_one_clear_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], kind: str
) -> None:
    missing = tmp_path / "nowhere.csv"
    assert main(["report", kind, "--input", str(missing), *_OPTIONS[kind]]) == 2
    err = capsys.readouterr().err
    assert "nowhere.csv: cannot open" in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_unbalanced_csv_and_missing_options(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / "u.csv"
    path.write_text("part,operator,value\n1,A,1\n1,A,2\n1,B,1\n2,A,1\n2,A,1\n2,B,1\n2,B,3\n")
    assert main(["report", "grr", "--input", str(path)]) == 2
    assert "balanced" in capsys.readouterr().err
    t1 = tmp_path / "t1.csv"
    t1.write_text("value\n1\n2\n")
    assert main(["report", "type1", "--input", str(t1)]) == 2
    assert "--reference and --tolerance" in capsys.readouterr().err
    assert main(["report", "yield", "--since", "yesterday-ish"]) == 2
    assert "--since" in capsys.readouterr().err


def test_read_tidy_csv_header_is_case_insensitive(tmp_path: Path) -> None:
    path = tmp_path / "x.csv"
    path.write_text("\ufeffPart,Value\nA,1\n")
    assert read_tidy_csv(str(path), {"part": str, "value": float}).to_dict("list") == {
        "part": ["A"], "value": [1.0]
    }  # fmt: skip


def test_help_for_every_kind() -> None:
    import subprocess

    root = Path(__file__).resolve().parents[2]
    out = subprocess.run([sys.executable, "-m", "gateway", "report", "--help"], cwd=root,
                         capture_output=True, text=True, timeout=60)  # fmt: skip
    assert out.returncode == 0
    from gateway.reports import KINDS

    for kind in KINDS:
        assert kind in out.stdout
        with pytest.raises(SystemExit) as exit_info:
            main(["report", kind, "--help"])
        assert exit_info.value.code == 0


def test_part_history_report() -> None:
    report = _run(["part", "HX210-0003"], store=demo_store())
    tests = report.result["tests"]
    assert [t["verdict"] for t in tests] == ["reject", "pass"]
    assert all(t["calibration_at"] is not None for t in tests)
    assert "final verdict pass after 1 reject(s)" in report.text
    assert "no tests" in _run(["part", "nope"], store=demo_store()).text


def test_retests_report() -> None:
    report = _run(["retests", "--by", "station,shift", "--timezone", "Europe/Berlin"],
                  store=demo_store())  # fmt: skip
    assert report.result["passed_after_retest"] == 4
    json.dumps(report.document(), allow_nan=False)


def test_standards_report(tmp_path: Path) -> None:
    path = tmp_path / "standards.csv"
    path.write_text(
        "serial,station,nominal_sccm,reference_pressure_pa,certificate_date,due_date,interval_months\n"
        "LS-3021,L1-S1,5,50000,2025-03-01,,12\n"
        "LS-3022,L1-S2,5,50000,2025-02-01,2026-02-20,\n"
    )
    report = _run(["standards", "--standards", str(path), "--today", "2026-02-25",
                   "--timezone", "Europe/Berlin"], store=demo_store())  # fmt: skip
    status = {s["serial"]: s for s in report.result["standards"]}
    assert (
        status["LS-3021"]["status"] == "due soon" and status["LS-3021"]["due_date"] == "2026-03-01"
    )
    assert status["LS-3022"]["status"] == "overdue"
    # L1-S2 calibrated daily until 2026-03-01: the runs after 20 Feb used an overdue standard.
    overdue = report.result["overdue_calibrations"]
    assert overdue and {o["station"] for o in overdue} == {"L1-S2"}
    assert all(o["ended_at"] >= "2026-02-21" for o in overdue)


def test_standards_bad_date_names_line_and_column(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / "s.csv"
    path.write_text("serial,station,nominal_sccm,reference_pressure_pa,certificate_date,due_date\n"
                    "LS-1,S1,5,50000,01.02.2025,2026-01-01\n")  # fmt: skip
    assert main(["report", "standards", "--standards", str(path), "--no-store"]) == 2
    assert "s.csv:2: column 'certificate_date': expected a date" in capsys.readouterr().err


def test_calibration_report_flags_a_standard_off_its_certificate(tmp_path: Path) -> None:
    # L1-S1's registered standard is certified at 500 kPa but the station tests at about
    # 350 kPa: its flow there is far below nominal (laminar model, analytics/standard_use.py)
    cfg = tmp_path / "plant.toml"
    cfg.write_text('site = "T"\n[[standards]]\nserial = "LS-9"\nstation = "L1-S1"\n'
                   'nominal = "3 sccm"\nreference_pressure = "500 kPa"\n'
                   'certificate_date = 2026-01-01\ninterval_months = 12\n'
                   '[[stations]]\nid = "L1-S1"\nline = "L1"\nprofile = "lf-delim"\n'
                   'endpoint = "tcp://127.0.0.1:9"\n')
    report = _run(["calibration", "--config", str(cfg)], store=demo_store())
    flags = report.result["standard_pressure"]
    assert flags and flags[0]["serial"] == "LS-9" and flags[0]["flow_factor"] < 0.8
    assert "certificate pressure" in report.text
