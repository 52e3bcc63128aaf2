"""docs/units.md lists every unit spelling the code accepts, and the prefix-case rule holds."""

from __future__ import annotations

from pathlib import Path

import pytest

from gateway.errors import UnitError
from gateway.units import _ALIASES, normalise_unit

DOC = (Path(__file__).resolve().parents[2] / "docs" / "units.md").read_text()


def test_every_spelling_is_documented() -> None:
    missing = [f"{kind}: {spelling}" for kind, aliases in _ALIASES.items()
               for spelling in aliases if f"`{spelling}`" not in DOC]
    assert not missing, missing


@pytest.mark.parametrize(("text", "kind", "unit"), [
    ("MBAR", "pressure", "mbar"), ("mBar", "pressure", "mbar"), ("KPA", "pressure", "kPa"),
    ("MPa", "pressure", "MPa"), ("MPA", "pressure", "MPa"), ("mL", "volume", "mL"),
])
def test_case_is_free_where_it_does_not_change_the_unit(text: str, kind: str, unit: str) -> None:
    assert normalise_unit(text, kind) == unit  # type: ignore[arg-type]


@pytest.mark.parametrize(("text", "kind"), [("mPa", "pressure"), ("Mbar", "pressure"),
                                            ("Ms", "time")])
def test_a_prefix_in_the_wrong_case_is_refused(text: str, kind: str) -> None:
    # SI brochure (9th ed., 3.1): m is milli (1e-3), M is mega (1e6); the case is the meaning
    with pytest.raises(UnitError, match="case of a metric prefix"):
        normalise_unit(text, kind)  # type: ignore[arg-type]
