"""OPC UA engineering units: UnitId from UNECE codes as OPC UA Part 8 defines it."""

from __future__ import annotations

from gateway.sinks.opcua import RESULT_VARS, UNITS, unit_id


def test_unit_ids_from_unece_codes() -> None:
    # OPC UA Part 8 (Data Access), EUInformation: UnitId packs the UNECE Rec. 20 common code's
    # characters, 8 bits each; its worked example is degree Celsius "CEL" = 4408652 (value
    # from memory of the specification's table)
    assert unit_id("CEL") == 4408652
    # UNECE Rec. 20 common codes: PAL = pascal, SEC = second, CEL = degree Celsius
    assert {u: c for u, (c, _) in UNITS.items() if c} == {"Pa": "PAL", "s": "SEC", "°C": "CEL"}
    assert {v.unit for v in RESULT_VARS if v.unit} <= set(UNITS)
