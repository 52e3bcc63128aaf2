"""A profile drafted from a capture reads the capture like the built-in profile, once a person
has filled in only what a capture cannot tell.

For each serial type with a shipped capture the draft is made, the "human choices" below are
added (the roles of the numbers and their units, the program column, and for stations that
must be asked the query), and every line the built-in profile turns into a record must become
the same record. The choices are listed per type: they are what the draft could not know.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

import pytest

from gateway.profiles import StationContext, load_profile, parse_profile
from gateway.profiles.check import check_sample
from gateway.records import Rejected
from gateway.workbench.draft import draft_profile
from tests.gateway.profiles.conftest import RECEIVED

SAMPLES = Path(__file__).resolve().parents[3] / "gateway" / "profiles" / "samples"


def q(col: str, unit: str | None = None, **more: Any) -> dict[str, Any]:
    return {"from": col, **({"unit": unit} if unit else {}), **more}


# per type: (result roles, calibration roles, other changes) a person fills in
HUMAN: dict[str, tuple[dict[str, Any], dict[str, Any], dict[str, Any]]] = {
    "lf-delim": (
        {"program": q("c4"), "test_pressure_pa": q("c7", "kPa"),
         "pressure_loss_pa": q("c8", "Pa"), "leak_rate_sccm": q("c9", "sccm"),
         "reject_limit_sccm": q("c10", "sccm"), "lower_limit_sccm": q("c11", "sccm"),
         "fill_s": q("c12", "s"), "stabilise_s": q("c13", "s"), "test_s": q("c14", "s"),
         "temperature_c": q("c15", "C")},
        {"program": q("c3"), "master_loss_pa": q("c4", "Pa"), "standard_loss_pa": q("c5", "Pa"),
         "standard_sccm": q("c6", "sccm"), "standard_ref_pressure_pa": q("c7", "kPa"),
         "ratio": q("c8")},
        {},
    ),
    "lf-semi": (
        {"program": q("prog", programs=True), "test_pressure_pa": q("druck", "mbar"),
         "pressure_loss_pa": q("verlust", "Pa"), "leak_rate_sccm": q("leck", "sccm")},
        {"program": q("c4", programs=True), "master_loss_pa": q("c5", "Pa"),
         "standard_loss_pa": q("c6", "Pa"), "standard_sccm": q("c7", "sccm")},
        {},
    ),
    "lf-noclock": (
        {"program": q("c2"), "leak_rate_sccm": q("c3", "sccm"),
         "pressure_loss_pa": q("c4", "Pa")},
        {"program": q("c1"), "master_loss_pa": q("c2", "Pa"), "standard_loss_pa": q("c3", "Pa"),
         "standard_sccm": q("c4", "sccm")},
        {},
    ),
    "lf-kv": (
        {"program": q("PRG"), "test_pressure_pa": q("P", unit_from="PU"),
         "pressure_loss_pa": q("DP", unit_from="PU"), "leak_rate_sccm": q("LR", unit_from="LU"),
         "reject_limit_sccm": q("LIM", unit_from="LU"),
         "lower_limit_sccm": q("LLIM", unit_from="LU"), "fill_s": q("TF"),
         "stabilise_s": q("TST"), "test_s": q("TT"), "temperature_c": q("TMP", "C")},
        {"program": q("PRG"), "master_loss_pa": q("ML", unit_from="PU"),
         "standard_loss_pa": q("SL", unit_from="PU"), "standard_sccm": q("STD", unit_from="LU"),
         "standard_ref_pressure_pa": q("STDP", unit_from="PU"),
         "passed": q("OK", codes={"1": True, "0": False})},
        {"query": "?LAST\r"},
    ),
    "lf-ticket": (
        {"cycle": "NO", "program": q("PROG"), "test_pressure_pa": q("PRESS", "bar"),
         "pressure_loss_pa": q("LOSS", "Pa"), "leak_rate_sccm": q("LEAK", "sccm"),
         "reject_limit_sccm": q("LIMIT", "sccm")},
        {"program": q("PROG"), "master_loss_pa": q("MASTER", "Pa"),
         "standard_loss_pa": q("STD", "Pa"), "standard_sccm": q("NOMINAL", "sccm")},
        {"query": "\x05{address:02d}T\r"},
    ),
}


def _records(entries: list[Any]) -> dict[str, dict[str, Any]]:
    out = {}
    for e in entries:
        if e.item is not None and not isinstance(e.item, Rejected):
            record = e.item.to_dict()
            for key in ("profile", "record_id", "received_at"):
                record.pop(key, None)
            out[f"{e.where}:{record.get('cycle', record.get('ended_at'))}"] = record
    return out


@pytest.mark.parametrize("name", sorted(HUMAN))
def test_a_draft_with_the_roles_filled_in_reads_like_the_builtin(name: str) -> None:
    capture = (SAMPLES / f"{name}.txt").read_bytes()
    draft = draft_profile(capture, f"{name}-draft")
    assert draft.choices  # it says what it could not know
    doc = tomllib.loads(draft.toml)
    result, calibration, other = HUMAN[name]
    doc["result"]["fields"].update(result)
    if "calibration" in doc:
        doc["calibration"]["fields"].update(calibration)
    if "query" in other:
        doc["serial"]["requests"][0]["query"] = other["query"]
    profile = parse_profile(doc, f"{name}-draft.toml")
    ctx = StationContext("S1", "L1", "Europe/Berlin", {2: "HX-210"})
    ours = _records(check_sample(profile, capture, ctx, RECEIVED))
    theirs = _records(check_sample(load_profile(name), capture, ctx, RECEIVED))
    assert theirs
    missing = sorted(set(theirs) - set(ours))
    assert not missing, f"lines the built-in reads and the draft rejects: {missing}"
    for key, record in theirs.items():
        assert ours[key] == record, key


@pytest.mark.parametrize(("data", "message"), [
    (b"", "empty"), (b"   \r\n\r\n", "empty"),
    (bytes(range(256)) * 4, "not text"),
])
def test_what_cannot_be_drafted_is_one_line(data: bytes, message: str) -> None:
    with pytest.raises(ValueError, match=message) as info:
        draft_profile(data)
    assert "\n" not in str(info.value)


def test_the_command_writes_a_draft_that_profile_check_reads(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import json

    from gateway.cli import main

    out = tmp_path / "semi.toml"
    assert main(["profile", "draft", str(SAMPLES / "lf-semi.txt"), "--name", "semi", "-o",
                 str(out), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["out"] == str(out) and doc["choices"] and out.read_text() == doc["toml"]
    # the raw draft already loads: profile check shows what it gets right before any choice
    assert main(["profile", "check", str(out), str(SAMPLES / "lf-semi.txt"), "--json",
                 "--timezone", "Europe/Berlin"]) == 0
    summary = json.loads(capsys.readouterr().out)["summary"]
    assert summary["results"] >= 4
    # never overwritten without --force; a bad name is one line
    assert main(["profile", "draft", str(SAMPLES / "lf-semi.txt"), "-o", str(out)]) == 2
    assert "exists" in capsys.readouterr().err
    assert main(["profile", "draft", str(SAMPLES / "lf-semi.txt"), "--name", "Bad Name"]) == 2
    assert main(["profile", "draft", str(tmp_path / "nope.txt")]) == 2
    err = capsys.readouterr().err
    assert "cannot read the capture" in err and "Traceback" not in err
