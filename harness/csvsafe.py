"""CSV for spreadsheets: text cells that a spreadsheet would run as a formula are neutralised.

Common practice against CSV injection (OWASP, "CSV Injection"): a text cell starting with ``=``,
``+``, ``-``, ``@``, a tab or a carriage return is prefixed with ``'`` so that a spreadsheet shows
it as text. Numbers (a negative ratio, say) are written as numbers and never changed. Every CSV
the project writes for people goes through :func:`write_csv` (atomic: temporary file, fsync,
rename).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")

__all__ = ["neutralise", "write_csv"]


def _cell(x):
    if isinstance(x, str) and x.startswith(_TRIGGERS):
        return "'" + x
    return x


def neutralise(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy whose text cells (and column names) cannot start a spreadsheet formula."""
    out = frame.copy()
    for c in out.columns:
        col = out[c]
        if col.dtype == object or pd.api.types.is_string_dtype(col.dtype) or isinstance(
                col.dtype, pd.CategoricalDtype):
            out[c] = col.astype(object).map(_cell)
    out.columns = [_cell(str(c)) if isinstance(c, str) else c for c in out.columns]
    return out


def write_csv(frame: pd.DataFrame, path: str | Path, *, index: bool = False) -> Path:
    """Write ``frame`` as spreadsheet-safe CSV, atomically; return the path."""
    from vintages import atomic_write_bytes

    path = Path(path)
    data = neutralise(frame).to_csv(index=index).encode("utf-8")
    atomic_write_bytes(path, data)
    return path
