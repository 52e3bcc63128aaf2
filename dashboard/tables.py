"""Tables as people read them: ``show`` prints a ``display.labelled`` frame with numbers to 4
significant digits and percentages (columns labelled "[%]") to one decimal, the values
themselves untouched so that sorting and downloads keep full precision."""

from __future__ import annotations

from typing import Any

import pandas as pd
import streamlit as st

__all__ = ["number_formats", "show"]


def number_formats(df: pd.DataFrame) -> dict[str, Any]:
    """Column configs for the float columns of ``df`` (integers print as they are)."""
    out: dict[str, Any] = {}
    for col in df.columns:
        if pd.api.types.is_float_dtype(df[col]):
            fmt = "%.1f" if str(col).endswith("[%]") else "%.4g"
            out[str(col)] = st.column_config.NumberColumn(format=fmt)
    return out


def show(df: pd.DataFrame, key: str, **kwargs: Any) -> None:
    """``st.dataframe`` without the index, full width, numbers formatted (see module doc)."""
    st.dataframe(df, hide_index=True, width="stretch", key=key,
                 column_config=number_formats(df) | kwargs.pop("column_config", {}), **kwargs)
