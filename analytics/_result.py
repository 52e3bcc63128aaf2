"""JSON-ready conversion shared by every result dataclass.

Results hold plain Python values (floats, ints, strings, datetimes, nested results, lists);
``to_dict`` turns them into JSON types: non-finite floats become ``None`` (JSON has no NaN),
datetimes ISO 8601 strings, numpy scalars Python numbers.
"""

from __future__ import annotations

import dataclasses
import math
from datetime import date, datetime
from enum import Enum
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["ResultMixin", "jsonable"]


def jsonable(value: Any) -> Any:
    """Convert a value (recursively) to something ``json.dumps`` accepts without NaN."""
    if value is None or value is pd.NA or value is pd.NaT:  # NaT is a datetime: check first
        return None
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Enum):
        return jsonable(value.value)
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        f = float(value)
        return f if math.isfinite(f) else None
    if isinstance(value, datetime):
        return value.isoformat()
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return [jsonable(v) for v in value.tolist()]
    if hasattr(value, "isoformat"):  # pandas Timestamp
        return value.isoformat()
    return value


class ResultMixin:
    """Adds ``to_dict`` (JSON-ready) to a result dataclass."""

    def to_dict(self) -> dict[str, Any]:
        out = jsonable(self)
        assert isinstance(out, dict)
        return out
