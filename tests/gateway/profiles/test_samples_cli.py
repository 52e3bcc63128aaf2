"""Shipped samples parse into the expected records; the profile CLI in text and JSON."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.profiles import StationContext, load_profile
from gateway.profiles.check import check_sample
from gateway.records import Rejected
from tests.gateway.profiles.conftest import RECEIVED

SAMPLES = Path(__file__).resolve().parents[3] / "gateway" / "profiles" / "samples"
ROOT = SAMPLES.parents[2]

# (profile, sample, [(line_no, kind, key fact)]) — "key fact" is cycle / program / reason text.
EXPECTED = {
    "lf-delim": ("lf-delim.txt", [
        (1, "result", 1042), (2, "result", 1043), (3, "calibration", "HX-210"),
        (4, "result", 1044), (5, "rejected", "verdict: unknown code 'XYZ'"),
        (6, "rejected", "is not a timestamp"), (7, "rejected", "has 8 fields"),
        (8, "rejected", "matches no line kind"), (9, "rejected", "'abc' is not a number"),
        (10, "calibration", "HX-230"), (11, "result", 1049), (12, "trace", 1049),
    ]),
    "lf-kv": ("lf-kv.txt", [
        (1, "note", None), (3, "result", 311), (21, "calibration", "MV-44"),
        (32, "rejected", "matches no line kind"), (34, "rejected", "unknown pressure unit"),
        (52, "rejected", "pressure_loss_pa (from 'DP'): missing"),
    ]),
    "lf-print": ("lf-print.txt", [
        (1, "result", 1042), (2, "result", 1043), (3, "calibration", "HX-210"),
        (4, "result", 1044), (5, "rejected", "is not a timestamp"), (6, "calibration", "HX-230"),
        (7, "rejected", "unknown code 'MAYBE'"), (8, "rejected", "matches no line kind"),
    ]),
    "lf-mbtcp": ("lf-mbtcp.json", [
        (0, "note", None), (0, "note", None), (0, "note", None), (1, "result", 1042),
        (2, "rejected", "torn block"), (3, "result", 1044), (4, "rejected", "unknown code '9'"),
        (1, "calibration", "HX-210"),
    ]),
    # the ticket sample: two stations' tickets, an empty answer (NAK), a calibration ticket
    # and a ticket whose block check is wrong (a digit changed in transit)
    "lf-ticket": ("lf-ticket.txt", [
        (1, "result", 4711), (14, "result", 815), (27, "note", None),
        (28, "calibration", "HX-210"), (38, "rejected", "block check (xor8): the frame says"),
    ]),
    "lf-mblast": ("lf-mblast.json", [
        (1, "result", 4294967294), (2, "result", 4294967295), (3, "result", 0),
        (4, "result", 1), (5, "result", 2),
    ]),
    "lf-mbnoclk": ("lf-mbnoclk.json", [
        (1, "result", 812), (2, "result", 813), (3, "result", 814), (4, "result", 815),
        (5, "result", 816),
    ]),
    "lf-mbrtu": ("lf-mbrtu.json", [
        (0, "note", None), (0, "note", None), (0, "note", None), (1, "result", 12),
        (2, "result", 13), (3, "rejected", "has 20 registers, expected 25"),
        (1, "calibration", "HX-210"),
    ]),
}


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_builtin_samples(name: str) -> None:
    sample, expected = EXPECTED[name]
    ctx = StationContext("S1", "L1", "Europe/Berlin", {1: "HX-210"}, traces=True)
    entries = check_sample(load_profile(name), (SAMPLES / sample).read_bytes(), ctx, RECEIVED)
    got = []
    for e in entries:
        if e.item is None:
            got.append((e.line_no, "note", None))
        elif isinstance(e.item, Rejected):
            fact = next((f for _, k, f in expected if k == "rejected" and f in e.item.reason),
                        e.item.reason)
            got.append((e.line_no, "rejected", fact))
        elif e.item.kind in ("result", "trace"):
            got.append((e.line_no, e.item.kind, e.item.cycle))  # type: ignore[union-attr]
        else:
            got.append((e.line_no, "calibration", e.item.program))
    assert got == expected


def test_delim_sample_values() -> None:
    ctx = StationContext("S1", "L1", "Europe/Berlin")
    entries = check_sample(load_profile("lf-delim"), (SAMPLES / "lf-delim.txt").read_bytes(), ctx,
                           RECEIVED)
    gross = entries[3].item
    assert gross is not None and not isinstance(gross, Rejected)
    d = gross.to_dict()
    assert d["verdict"] == "gross" and d["part_id"] is None and d["lower_limit_sccm"] is None
    assert d["ended_at"] == "2026-12-02T06:16:40+00:00"
    failed = entries[9].item
    assert failed is not None and failed.to_dict()["passed"] is False
    # curves of a station that is not collecting them are dropped, not quarantined
    assert [getattr(e.item, "kind", None) for e in entries].count("trace") == 0
    assert entries[-1].line_no == 11


def test_cli_check_text(capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["profile", "check", "lf-delim", str(SAMPLES / "lf-delim.txt"),
                 "--station", "L1-S1", "--timezone", "Europe/Berlin"])
    out = capsys.readouterr().out
    assert code == 0
    assert "profile lf-delim@1.0" in out and "station L1-S1 / L1" in out
    assert "line 5   REJECTED     verdict: unknown code 'XYZ'" in out
    assert "                      leak_rate_sccm     0.213" in out
    assert "line 12  trace        id" in out and "28 samples, 0 .. 351040 .. 300 Pa" in out
    assert out.rstrip().endswith(
        "summary: 4 results, 2 calibrations, 1 pressure curves, 5 rejected")


def test_cli_check_json(capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["profile", "check", "lf-mbtcp", str(SAMPLES / "lf-mbtcp.json"), "--json",
                 "--program", "1=HX-210"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0
    assert doc["profile"] == "lf-mbtcp@1.0"
    assert doc["summary"] == {"results": 2, "calibrations": 1, "traces": 0, "rejected": 2}
    torn = next(e for e in doc["entries"] if e["kind"] == "rejected")
    assert torn["record"]["reason"].startswith("torn block") and torn["line_no"] == 2
    first = next(e for e in doc["entries"] if e["kind"] == "result")["record"]
    assert first["cycle"] == 1042 and first["program"] == "HX-210"


def test_cli_list_and_show(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["profile", "list"]) == 0
    out = capsys.readouterr().out
    assert "lf-mbrtu" in out and "modbus" in out
    assert main(["profile", "show", "lf-kv"]) == 0
    assert 'query = "?LAST\\r"' in capsys.readouterr().out


def test_cli_bad_inputs_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["profile", "check", "nope", str(SAMPLES / "lf-delim.txt")]) == 2
    assert "profile 'nope': expected a profile file" in capsys.readouterr().err
    assert main(["profile", "check", "lf-delim", str(tmp_path / "missing.txt")]) == 2
    assert "cannot read sample" in capsys.readouterr().err
    bad = tmp_path / "dump.json"
    bad.write_text('{"results": [{"cycle": 1, "registers": "no"}]}')
    assert main(["profile", "check", "lf-mbtcp", str(bad)]) == 2
    assert "results[0].registers: expected an array" in capsys.readouterr().err
    broken = tmp_path / "broken.toml"
    broken.write_text('[profile]\nname = "broken"\n')
    assert main(["profile", "check", str(broken), str(bad)]) == 2
    assert "profile.version: expected a string (missing)" in capsys.readouterr().err


@pytest.mark.timeout(60)
def test_cli_as_module_help() -> None:
    out = subprocess.run([sys.executable, "-m", "gateway", "profile", "check", "--help"],
                         cwd=ROOT, capture_output=True, text=True, check=True).stdout
    assert "register dump" in out and "--timezone" in out


def test_list_shows_the_good_profiles_and_names_the_bad_ones(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from gateway.cli import main

    assert main(["profile", "show", "lf-kv"]) == 0
    copy = capsys.readouterr().out
    (tmp_path / "my-station.toml").write_text(copy)
    (tmp_path / "broken.toml").write_text("this is not toml\n")
    code = main(["profile", "list", "--profiles", str(tmp_path)])
    out, err = capsys.readouterr()
    assert code == 1 and "lf-delim" in out and "lf-semi" in out
    assert "broken.toml: not valid TOML" in err
    assert "set name = 'my-station'" in err and "Traceback" not in err


def test_check_shows_where_each_value_came_from(capsys: pytest.CaptureFixture[str]) -> None:
    # an integrator sees the raw text behind a value and what the profile did to it
    rc = main(["profile", "check", "lf-semi", str(SAMPLES / "lf-semi.txt"), "--program",
               "2=HX-210", "--timezone", "Europe/Berlin", "--json"])
    assert rc == 0
    doc = json.loads(capsys.readouterr().out)
    first = next(e for e in doc["entries"] if e["kind"] == "result")
    origins = first["origins"]
    assert origins["test_pressure_pa"] == {
        "raw": "pressure='2.000,5'", "applied": "decimal ','; thousands '.' dropped; unit mbar"}
    assert origins["ended_at"]["raw"] == "date+time='03.12.26 14:05:09'"
    assert origins["verdict"]["applied"] == "code table → pass"
    assert origins["program"]["applied"] == "program number → station's programs"
    rc = main(["profile", "check", "lf-mbinput", str(SAMPLES / "lf-mbinput.json"), "--json"])
    doc = json.loads(capsys.readouterr().out)
    first = next(e for e in doc["entries"] if e["kind"] == "result")
    assert first["origins"]["pressure_loss_pa"]["raw"] == "@14: 0000 04E0"
    assert "× 0.01" in first["origins"]["pressure_loss_pa"]["applied"]
    rc = main(["profile", "check", "lf-noclock", str(SAMPLES / "lf-noclock.txt"), "--json"])
    doc = json.loads(capsys.readouterr().out)
    first = next(e for e in doc["entries"] if e["kind"] == "result")
    assert "receive time" in first["origins"]["ended_at"]["applied"]


def test_check_with_an_address_rejects_a_neighbours_ticket(
        capsys: pytest.CaptureFixture[str]) -> None:
    rc = main(["profile", "check", "lf-ticket", str(SAMPLES / "lf-ticket.txt"), "--address", "1",
               "--json"])
    assert rc == 0
    doc = json.loads(capsys.readouterr().out)
    reasons = [e["record"]["reason"] for e in doc["entries"] if e["kind"] == "rejected"]
    assert any("station address '02', this station is 1" in r for r in reasons)
