"""``leakfleet sim study`` + ``leakfleet report backdown``: long-cycle traces in the journal
give the shortest cycle that meets the %GRR target; errors are one line.

The map itself is validated against brute-force repeated simulated tests and the ideal-gas
mole balance in tests/analytics/test_backdown.py; this checks the path through the journal.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from gateway.cli import main


def test_study_then_backdown_names_a_shorter_cycle(tmp_path: Path,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    url = f"sqlite:///{tmp_path / 'j.db'}"
    assert main(["sim", "study", "--station", "L1-S1", "--program", "HX-210", "--store", url,
                 "--masters", "12", "--standards", "4", "--stabilise", "20", "--test", "20",
                 "--interval", "0.2"]) == 0
    assert "wrote 16 trace(s)" in capsys.readouterr().out
    assert main(["report", "backdown", "--station", "L1-S1", "--store", url,
                 "--tolerance", "2", "--standard-sccm", "3", "--step", "2", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert (doc["n_master"], doc["n_standard"]) == (12, 4)
    chosen = doc["chosen"]
    assert chosen is not None and chosen["verdict"] == "meets"
    assert chosen["pct_grr_high"] <= 10.0
    assert chosen["cycle_s"] < 40.0  # shorter than the recorded 20 s + 20 s
    # the same again as text
    assert main(["report", "backdown", "--station", "L1-S1", "--store", url,
                 "--tolerance", "2", "--standard-sccm", "3", "--step", "2"]) == 0
    assert "Shortest cycle meeting the target" in capsys.readouterr().out


@pytest.mark.parametrize(("args", "message"), [
    (["report", "backdown", "--station", "L1-S1"], "no master or standard traces"),
    (["sim", "study", "--station", "L9-S9"], "no station 'L9-S9'"),
    (["sim", "study", "--station", "L1-S1", "--test", "0"], "--test"),
])  # fmt: skip
def test_errors_are_one_line(args: list[str], message: str, tmp_path: Path,
                             capsys: pytest.CaptureFixture[str]) -> None:
    from gateway.store import open_journal

    open_journal(f"sqlite:///{tmp_path / 'j.db'}").close()  # a gateway's journal, no curves
    code = main([*args, "--store", f"sqlite:///{tmp_path / 'j.db'}"])
    err = capsys.readouterr().err
    assert code != 0 and message in err and "Traceback" not in err


def test_a_journal_that_does_not_exist_is_named_not_created(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    missing = tmp_path / "nope.db"
    assert main(["report", "backdown", "--station", "L1-S1",
                 "--store", f"sqlite:///{missing}"]) == 2
    assert "no such file" in capsys.readouterr().err
    assert not missing.exists()
