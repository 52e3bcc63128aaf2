from __future__ import annotations

from datetime import UTC, datetime

import pytest

from gateway.profiles import StationContext

RECEIVED = datetime(2026, 12, 2, 8, 0, tzinfo=UTC)


@pytest.fixture
def ctx() -> StationContext:
    return StationContext("L1-S1", "L1", "Europe/Berlin", {1: "HX-210", 2: "HX-230"})
