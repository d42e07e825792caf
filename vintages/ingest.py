"""Readers and validation for release files; every error names file, line and field.

Accepted layouts
----------------
``long``
    A table (CSV or Parquet) with columns ``variable, period, release, value``: one row per value
    published for a (variable, reference period) on a release date.
``triangle``
    One variable's release triangle in CSV: the first column holds reference periods, every
    other column header is a release date, each cell the value published on that date; a blank
    cell means "not published in that release".

Periods are written ``2001Q3`` (quarterly) or ``2001-07`` (monthly); release dates ``YYYY-MM-DD``.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from vintages._types import FREQS, LAYOUTS
from vintages.errors import InputError
from vintages.periods import format_periods, parse_periods, period_end

REQUIRED = ("variable", "period", "release", "value")
SAFE_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,63}$")


def read_releases(path: str | Path, *, layout: str = "long", variable: str | None = None,
                  freq: str | None = None) -> pd.DataFrame:
    """Read one release file into a long table with a ``_line`` column (1-based file line).

    Parameters
    ----------
    path : path-like
        A CSV (``long`` or ``triangle``) or Parquet (``long``) file.
    layout : {"long", "triangle"}
    variable : str, optional
        The variable a triangle holds (required for ``triangle``).
    freq : {"Q", "M"}, optional
        Expected frequency; checked against the period labels.

    Raises
    ------
    InputError
        Unreadable or empty file, missing column, bad layout option.
    """
    path = Path(path)
    if layout not in LAYOUTS:
        raise InputError(f"unknown layout {layout!r}; expected one of {sorted(LAYOUTS)}", file=str(path))
    if freq is not None and freq not in FREQS:
        raise InputError(f"unknown frequency {freq!r}; expected one of {sorted(FREQS)}", file=str(path))
    if not path.is_file():
        raise InputError("file not found or not a regular file", file=str(path))
    try:
        if path.suffix.lower() == ".parquet":
            if layout != "long":
                raise InputError("a Parquet file must use the long layout", file=str(path))
            raw = pd.read_parquet(path)
            raw = raw.astype({c: "object" for c in raw.columns if c != "value"})
            first_line = 1  # rows of a Parquet file are numbered from 1
        else:
            raw = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=False)
            first_line = 2  # line 1 is the header
    except InputError:
        raise
    except pd.errors.EmptyDataError:
        raise InputError("file is empty", file=str(path)) from None
    except Exception as exc:  # any reader failure is an input problem of this file
        raise InputError(f"cannot read file: {type(exc).__name__}: {exc}".splitlines()[0], file=str(path)) from None
    raw.columns = [str(c).strip() for c in raw.columns]
    raw["_line"] = np.arange(first_line, first_line + len(raw))
    if layout == "long":
        if "value" in raw and raw["value"].dtype == object:
            raw = raw[~_blank_row(raw)]
        missing = [c for c in REQUIRED if c not in raw.columns]
        if missing:
            raise InputError(f"missing column(s) {missing}; a long table needs {list(REQUIRED)}",
                             file=str(path), line=1, field=missing[0])
        if raw.empty:
            raise InputError("file has a header but no data rows", file=str(path))
        out = raw[list(REQUIRED) + ["_line"]].copy()
    else:
        if variable is None:
            raise InputError("a triangle holds one variable: name it (--variable NAME)", file=str(path))
        if raw.shape[1] < 3:
            raise InputError("a triangle needs a period column and at least one release-date column",
                             file=str(path), line=1)
        pcol = raw.columns[0]
        dates = [c for c in raw.columns[1:] if c != "_line"]
        for c in dates:
            try:
                pd.Timestamp(c)
                if not re.match(r"^\d{4}-\d{2}-\d{2}$", c):
                    raise ValueError
            except ValueError:
                raise InputError(f"column header {c!r} is not a release date YYYY-MM-DD",
                                 file=str(path), line=1, field=c) from None
        long = raw.melt(id_vars=[pcol, "_line"], value_vars=dates, var_name="release", value_name="value")
        long = long[long["value"].astype(str).str.strip() != ""]
        if long.empty:
            raise InputError("the triangle holds no values", file=str(path))
        long = long.rename(columns={pcol: "period"})
        long["variable"] = variable
        long["_field"] = long["release"]
        out = long[list(REQUIRED) + ["_line", "_field"]].reset_index(drop=True)
    out.attrs["source"] = str(path)
    out.attrs["expected_freq"] = freq
    return out


def _blank_row(df: pd.DataFrame) -> pd.Series:
    cols = [c for c in df.columns if c != "_line"]
    return df[cols].astype(str).apply(lambda s: s.str.strip() == "").all(axis=1)


def validate_table(df: pd.DataFrame, *, known: dict[str, dict] | None = None,
                   new_meta: dict[str, dict] | None = None, source: str | None = None,
                   allow_early: bool = False) -> pd.DataFrame:
    """Validate and normalise a long release table; return it ready to append.

    The result has columns variable (str), period (label), release (datetime64[s]),
    value (float64), sorted, without duplicate rows; ``attrs["freqs"]`` maps variable to
    frequency.

    Raises
    ------
    InputError
        Naming file, line and field of the first bad cell, for: a missing column, an unsafe
        variable name, an unparsable period or release date, a period of the wrong frequency,
        a variable with mixed frequencies, a non-numeric, NaN or infinite value, a release
        dated before its reference period ends (unless ``allow_early``), and duplicate cells
        with different values.
    """
    known = known or {}
    new_meta = new_meta or {}
    src = source or df.attrs.get("source") or "<table>"
    allow_early = allow_early or bool(df.attrs.get("allow_early"))
    expected = df.attrs.get("expected_freq")
    missing = [c for c in REQUIRED if c not in df.columns]
    if missing:
        raise InputError(f"missing column(s) {missing}; need {list(REQUIRED)}", file=src, field=missing[0])
    if len(df) == 0:
        raise InputError("no rows to ingest", file=src)
    lines = df["_line"].to_numpy() if "_line" in df else np.arange(2, len(df) + 2)
    fields = df["_field"].to_numpy() if "_field" in df else None

    def fail(mask, message, field):
        i = int(np.flatnonzero(np.asarray(mask))[0])
        fld = fields[i] if (fields is not None and field in ("value",)) else field
        raise InputError(message(i), file=src, line=int(lines[i]), field=fld)

    var = df["variable"].astype(str).str.strip().to_numpy()
    bad = np.array([not SAFE_NAME.match(v) for v in var])
    if bad.any():
        fail(bad, lambda i: f"variable name {var[i]!r} is not a safe identifier "
             "(a letter, then letters, digits or '_', at most 64)", "variable")

    ords, freq = parse_periods(df["period"].to_numpy())
    bad = freq == ""
    if bad.any():
        fail(bad, lambda i: f"cannot parse period {df['period'].iloc[i]!r}; expected e.g. 2001Q3 or 2001-07", "period")

    rel_raw = df["release"]
    rel_str = rel_raw.astype(str).str.strip()
    rel = pd.to_datetime(rel_str, format="%Y-%m-%d", errors="coerce") if rel_raw.dtype == object \
        else pd.to_datetime(rel_raw, errors="coerce")
    if rel_raw.dtype == object:
        rel2 = pd.to_datetime(rel_str, format="ISO8601", errors="coerce")
        rel = rel.fillna(rel2)
    bad = rel.isna().to_numpy()
    if bad.any():
        fail(bad, lambda i: f"cannot parse release date {rel_raw.iloc[i]!r}; expected YYYY-MM-DD", "release")
    rel = rel.dt.normalize()

    val_raw = df["value"]
    val = pd.to_numeric(val_raw.astype(str).str.strip() if val_raw.dtype == object else val_raw, errors="coerce")
    val = val.to_numpy(dtype=np.float64)
    nonnum = np.isnan(val) & ~val_raw.astype(str).str.strip().str.lower().isin(["nan", "-nan", "+nan"]).to_numpy()
    if nonnum.any():
        fail(nonnum, lambda i: f"value {val_raw.iloc[i]!r} is not a number", "value")
    bad = ~np.isfinite(val)
    if bad.any():
        fail(bad, lambda i: f"value {val_raw.iloc[i]!r} is NaN or infinite; leave the cell out instead", "value")

    freqs: dict[str, str] = {}
    for name in pd.unique(var):
        sel = var == name
        fs = pd.unique(freq[sel])
        if len(fs) > 1:
            first_f = freq[np.flatnonzero(sel)[0]]
            fail(sel & (freq != first_f), lambda i: f"variable {name!r} mixes frequencies "
                 f"{sorted(fs)}; one variable has one frequency", "period")
        want = (known.get(name) or {}).get("freq") or (new_meta.get(name) or {}).get("freq") or expected
        if want is not None and want not in FREQS:
            raise InputError(f"unknown frequency {want!r} for {name!r}; expected one of {sorted(FREQS)}", file=src)
        if want is not None and fs[0] != want:
            fail(sel, lambda i: f"period {df['period'].iloc[i]!r} is {_fname(fs[0])} but variable {name!r} "
                 f"is {_fname(want)}", "period")
        freqs[name] = fs[0]

    if not allow_early:
        ends = np.empty(len(df), dtype="datetime64[D]")
        for f in ("Q", "M"):
            s = freq == f
            if s.any():
                ends[s] = period_end(ords[s], f)
        early = rel.to_numpy().astype("datetime64[D]") <= ends
        if early.any():
            fail(early, lambda i: f"release date {rel.iloc[i].date()} is not after the end of period "
                 f"{df['period'].iloc[i]!s} ({ends[i]}); a value cannot be published before its period "
                 "ends (allow it for forecasts-as-data with --allow-early)", "release")

    labels = np.empty(len(df), dtype=object)
    for f in ("Q", "M"):
        s = freq == f
        if s.any():
            labels[s] = format_periods(ords[s], f)
    out = pd.DataFrame({"variable": var, "period": labels, "release": rel.astype("datetime64[s]").to_numpy(),
                        "value": val, "_line": lines})
    key = ["variable", "period", "release"]
    dup = out.duplicated(key, keep=False)
    if dup.any():
        d = out[dup]
        nunique = d.groupby(key)["value"].transform("nunique")
        clash = d[nunique > 1]
        if len(clash):
            second = clash[clash.duplicated(key, keep="first")].iloc[0]
            firstrow = clash[(clash[key] == second[key]).all(axis=1)].iloc[0]
            raise InputError(f"duplicate cell {second['variable']} {second['period']} released "
                             f"{pd.Timestamp(second['release']).date()} with a different value "
                             f"({second['value']!r} here, {firstrow['value']!r} on line {int(firstrow['_line'])})",
                             file=src, line=int(second["_line"]), field="value")
    out = out.drop_duplicates(key).drop(columns="_line")
    out["_ord"] = parse_periods(out["period"].to_numpy())[0]
    out = out.sort_values(["variable", "_ord", "release"]).drop(columns="_ord").reset_index(drop=True)
    out.attrs["freqs"] = freqs
    return out


def _fname(f: str) -> str:
    return {"Q": "quarterly", "M": "monthly"}.get(f, f)


__all__ = ["read_releases", "validate_table", "REQUIRED", "SAFE_NAME"]
