"""Readers and validation for release files; every error names file, line and field.

Accepted layouts
----------------
``long``
    A table (CSV or Parquet) with columns ``variable, period, release, value``: one row per value
    published for a (variable, reference period) on a release date. Other columns are ignored.
``triangle``
    One variable's release triangle in CSV: the first column holds reference periods, every
    other column header is a release date, each cell the value published on that date; a blank
    cell means "not published in that release".

Periods are written ``2001Q3`` (quarterly) or ``2001-07`` (monthly); release dates ``YYYY-MM-DD``.
Digits are ASCII ``0``-``9`` only and years lie in 1800-2200 (:data:`vintages.periods.YEAR_MIN`,
:data:`~vintages.periods.YEAR_MAX`), for reference periods and release dates alike. Cells may be
padded with ASCII spaces or tabs; any other control character (NUL, line breaks, ...) in a
``variable``, ``period``, ``release`` or ``value`` cell is refused. A release dated more than a
year after the ingest day is refused unless ``allow_future`` is given. Error messages show at
most 60 characters of a cell.

Where errors point
------------------
* CSV: ``line`` is the physical line of the file, the header being line 1 (a quoted field that
  spans lines is counted correctly). Blank lines are skipped but still counted.
* Parquet and in-memory tables: ``line`` is the 1-based row number (there are no text lines).
* ``field`` is the column name; in a triangle, a value's or release date's field is the
  release-date column header, and a period's field is the header of the first column.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import re
from pathlib import Path

import numpy as np
import pandas as pd

from vintages._types import FREQS, LAYOUTS
from vintages.errors import InputError
from vintages.periods import (
    YEAR_MAX,
    YEAR_MIN,
    format_periods,
    parse_periods,
    period_end,
    period_problem,
)

REQUIRED = ("variable", "period", "release", "value")
SAFE_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,63}$")
# ASCII digits only: [0-9], never \d (which matches full-width and other Unicode digits).
_DATE_HEADER = re.compile(r"^[0-9]{4}-[0-9]{2}-[0-9]{2}$")
# A day, optionally with a time of day (timestamps written by other tools); never a bare month.
_DATE_CELL = re.compile(r"^[0-9]{4}-[0-9]{2}-[0-9]{2}(?:[T ][0-9]{2}:[0-9]{2}(?::[0-9]{2}(?:\.[0-9]+)?)?)?$")
# A decimal number in ASCII (what pandas.to_numeric is then asked to convert).
_NUMBER = re.compile(r"^[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$")
_NONFINITE_WORDS = ("nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity", "-infinity")
# Control characters (C0 but tab, DEL, C1) and the Unicode line/paragraph separators.
_CONTROL_RE = re.compile("[\x00-\x08\x0a-\x1f\x7f-\x9f\u2028\u2029]")
_BLANKS = " \t"  # what a cell may be padded with
_SHOW = 60  # characters of a cell shown in a message
_PARQUET_SUFFIXES = (".parquet", ".pq")


def read_releases(path: str | Path, layout: str = "long", variable: str | None = None,
                  freq: str | None = None, *, sdmx_map=None, release=None, release_column=None,
                  skip_unmapped: bool = False) -> pd.DataFrame:
    """Read one release file into a long table with a ``_line`` column (where each value was read).

    Parameters
    ----------
    path : path-like
        A CSV (``long`` or ``triangle``) or Parquet (``long``; suffix ``.parquet`` or ``.pq``) file.
    layout : {"long", "triangle", "sdmx-csv"}
        The file's layout (see the module docstring); ``sdmx-csv`` reads SDMX-CSV 1.0/2.0
        files (:func:`vintages.sdmx.read_sdmx_csv`).
    variable : str, optional
        The variable a triangle holds (required for ``triangle``, ignored for ``long``).
    freq : {"M", "Q"}, optional
        Expected frequency of every variable in the file; checked by :func:`validate_table`.
    sdmx_map : mapping or path, optional
        ``sdmx-csv`` only: which dimension values make which variable (a dict or a TOML file).
    release, release_column : optional
        ``sdmx-csv`` only: the release date of the file's values, or the column holding it.
    skip_unmapped : bool
        ``sdmx-csv`` only: ignore rows that match no entry of the map (default: refuse them).

    Returns
    -------
    pandas.DataFrame
        Columns ``variable, period, release, value`` as read (not yet validated), ``_line``
        (1-based: the CSV line, header = 1, or the Parquet row) and, for a triangle, ``_field``
        (the release-date column header of each value). ``attrs`` holds ``source`` (the path),
        ``expected_freq`` and, for a triangle, ``period_field``.

    Raises
    ------
    InputError
        Unreadable or empty file, bad layout or frequency option, missing or duplicate column,
        a triangle column header that is not a release date, an unsafe triangle variable name.
    """
    path = Path(path)
    src = str(path)
    if layout not in LAYOUTS:
        raise InputError(f"unknown layout {layout!r}; expected one of {sorted(LAYOUTS)}", file=src)
    if freq is not None and freq not in FREQS:
        raise InputError(f"unknown frequency {freq!r}; expected one of {sorted(FREQS)}", file=src)
    if layout == "sdmx-csv":
        from vintages.sdmx import read_sdmx_csv

        if sdmx_map is None:
            raise InputError("an SDMX-CSV file needs a map of dimension values to variables "
                             "(--map FILE)", file=src)
        return read_sdmx_csv(path, variables=sdmx_map, release=release, release_column=release_column,
                             freq=freq, skip_unmapped=skip_unmapped)
    if layout == "triangle":
        if variable is None:
            raise InputError("a triangle holds one variable: name it (--variable NAME)", file=src)
        if not _safe(variable):
            raise InputError(f"variable name {variable!r} is not a safe identifier ({_SAFE_RULE})",
                             file=src, field="variable")
    if not path.is_file():
        raise InputError("file not found or not a regular file", file=src)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {type(exc).__name__}: {exc.strerror or exc}", file=src) from None
    if not data.strip():
        raise InputError("file is empty", file=src)
    if path.suffix.lower() in _PARQUET_SUFFIXES:
        if layout != "long":
            raise InputError("a Parquet file must use the long layout", file=src)
        raw = _read_parquet(data, src)
        raw["_line"] = np.arange(1, len(raw) + 1)  # no text lines in Parquet: rows from 1
        header = list(raw.columns[:-1])
    else:
        raw, header = _read_csv(data, src)
    _check_header(header, src)
    if layout == "long":
        out = _long(raw, src)
    else:
        out = _triangle(raw, variable, src)
    out.attrs["source"] = src
    out.attrs["expected_freq"] = freq
    return out


def _read_parquet(data: bytes, src: str) -> pd.DataFrame:
    """Read Parquet bytes (native dtypes are kept; validation copes with text or typed columns)."""
    import pyarrow.parquet as pq

    try:
        raw = pq.read_table(io.BytesIO(data)).to_pandas()
    except Exception as exc:  # any reader failure is an input problem of this file
        raise InputError(_one_line(f"cannot read Parquet file: {type(exc).__name__}: {exc}"), file=src) from None
    raw.columns = [str(c).strip() for c in raw.columns]
    return raw.reset_index(drop=True)


def _read_csv(data: bytes, src: str) -> tuple[pd.DataFrame, list[str]]:
    """Read CSV bytes as text cells; return the frame (with ``_line``) and the header cells."""
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        raise InputError("cannot read file: UTF-16 text (byte-order mark); save it as UTF-8", file=src,
                         line=1) from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise InputError(f"cannot read file: not UTF-8 text (byte {data[exc.start]:#04x} at offset "
                         f"{exc.start}); save it as UTF-8", file=src, line=line) from None
    try:
        # header=None: the header is row 0, so a data row longer than the header is an error
        # (with a header row pandas would silently take the extra field as an index).
        raw = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, skip_blank_lines=False,
                          header=None)
    except pd.errors.EmptyDataError:
        raise InputError("file is empty", file=src) from None
    except pd.errors.ParserError as exc:
        eof = re.search(r"EOF inside string starting at row (\d+)", str(exc))
        if eof is not None:
            line, field = _unterminated(text, int(eof.group(1)))
            raise InputError("unterminated quoted field: a '\"' opens here and is never closed",
                             file=src, line=line, field=field) from None
        m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
        if m is None:
            raise InputError(_one_line(f"cannot read file: {type(exc).__name__}: {exc}"), file=src) from None
        record = int(m.group(2))  # pandas counts records; a quoted line break makes lines differ
        starts = _record_starts(text)
        line = starts[record - 1] if starts is not None and record <= len(starts) else record
        raise InputError(f"row has {m.group(3)} fields but the header has {m.group(1)}",
                         file=src, line=line) from None
    except Exception as exc:  # any other reader failure is an input problem of this file
        raise InputError(_one_line(f"cannot read file: {type(exc).__name__}: {exc}"), file=src) from None
    header = [str(c).strip() for c in raw.iloc[0].fillna("")]
    raw = raw.iloc[1:].reset_index(drop=True).fillna("")
    raw.columns = header
    n = len(raw)
    starts = _record_starts(text)
    raw["_line"] = (np.asarray(starts[1:], dtype=np.int64) if starts is not None and len(starts) == n + 1
                    else np.arange(2, n + 2))
    return raw, header


def _unterminated(text: str, row: int) -> tuple[int, str | None]:
    """Physical line and header field of the record ``row`` (0-based, header = 0) whose quote
    never closes (pandas counts records, and earlier quoted fields may span lines)."""
    reader = csv.reader(io.StringIO(text))
    header: list[str] = []
    prev = 0
    for k, rec in enumerate(reader):
        if k == 0:
            header = [c.strip() for c in rec]
        if k == row:
            # The open quote swallows the rest of the file into the record's last field.
            col = len(rec) - 1
            return prev + 1, (header[col] if 0 <= col < len(header) and row > 0 else None)
        prev = reader.line_num
    return prev + 1, None


def _record_starts(text: str) -> list[int] | None:
    """First physical line of every record (header included), or None when lines are records."""
    if '"' not in text:
        return None  # no quoting: one record per line
    # A quoted field may hold line breaks: count physical lines the way the csv module reads them.
    reader = csv.reader(io.StringIO(text))
    starts, prev = [], 0
    for _ in reader:
        starts.append(prev + 1)
        prev = reader.line_num
    return starts


def _check_header(header: list[str], src: str) -> None:
    seen: set[str] = set()
    for c in header:
        if c in seen:
            raise InputError(f"duplicate column {c!r} in the header", file=src, line=1, field=c)
        seen.add(c)


def _long(raw: pd.DataFrame, src: str) -> pd.DataFrame:
    missing = [c for c in REQUIRED if c not in raw.columns]
    if missing:
        got = sorted(c for c in raw.columns if c != "_line")
        raise InputError(f"missing column(s) {missing}; a long table needs {list(REQUIRED)}, got {got}",
                         file=src, line=1, field=missing[0])
    out = raw[list(REQUIRED) + ["_line"]]
    blank = np.ones(len(out), dtype=bool)
    for c in REQUIRED:
        blank &= _text_blank(out[c])
    out = out[~blank].reset_index(drop=True)
    if out.empty:
        raise InputError("file has a header but no data rows", file=src)
    return out


def _triangle(raw: pd.DataFrame, variable: str, src: str) -> pd.DataFrame:
    cols = [c for c in raw.columns if c != "_line"]
    if len(cols) < 2:
        raise InputError("a triangle needs a period column and at least one release-date column",
                         file=src, line=1)
    pcol, dates = cols[0], cols[1:]
    for c in dates:
        if not _DATE_HEADER.match(c) or not _valid_day(c):
            raise InputError(f"column header {c!r} is not a release date YYYY-MM-DD",
                             file=src, line=1, field=c)
    vals = raw[dates].to_numpy(dtype=object)  # (row, release column)
    # Object strings, not NumPy unicode (which drops trailing NULs and would hide a "\x00" cell).
    filled = np.array([[isinstance(x, str) and x.strip(_BLANKS) != "" for x in row] for row in vals],
                      dtype=bool).reshape(vals.shape)
    r, c = np.nonzero(filled)  # row-major: the order a reader meets the cells
    if not len(r):
        raise InputError("the triangle holds no values", file=src)
    dates_arr = np.asarray(dates, dtype=object)
    out = pd.DataFrame({
        "variable": np.full(len(r), variable, dtype=object),
        "period": raw[pcol].to_numpy(dtype=object)[r],
        "release": dates_arr[c],
        "value": vals[r, c],
        "_line": raw["_line"].to_numpy()[r],
        "_field": dates_arr[c],
    })
    out.attrs["period_field"] = pcol or "column 1"
    return out


def _valid_day(s: str) -> bool:
    try:
        np.datetime64(s, "D")
    except ValueError:
        return False
    return True


def _text_blank(s: pd.Series) -> np.ndarray:
    if not _is_text(s):
        return np.asarray(s.isna())
    cells = _Cells(s)
    return np.asarray(s.isna()) | cells.rows(cells.stripped == "")


def _is_text(s: pd.Series) -> bool:
    return s.dtype == object or pd.api.types.is_string_dtype(s.dtype)


def _safe(name) -> bool:
    return isinstance(name, str) and SAFE_NAME.fullmatch(name) is not None


_SAFE_RULE = "a letter, then letters, digits or '_', at most 64 characters"


def _one_line(msg: str) -> str:
    return " ".join(msg.split())


def validate_table(df: pd.DataFrame, *, known: dict[str, dict] | None = None,
                   new_meta: dict[str, dict] | None = None, source: str | None = None,
                   allow_early: bool = False, allow_future: bool = False, today=None) -> pd.DataFrame:
    """Validate and normalise a long release table; return it ready to append.

    Parameters
    ----------
    df : pandas.DataFrame
        Columns ``variable, period, release, value`` (text or typed); optionally ``_line`` and
        ``_field`` as written by :func:`read_releases`. Without ``_line`` rows are numbered from 1.
    known : dict, optional
        Metadata of the variables already in the store (``{name: {"freq": ...}}``).
    new_meta : dict, optional
        Declared metadata (``freq`` may be given) for variables of this batch.
    source : str, optional
        File name for messages; defaults to ``df.attrs["source"]`` or ``"<table>"``.
    allow_early : bool
        Accept release dates on or before the end of the reference period.
    allow_future : bool
        Accept release dates more than a year after ``today`` (e.g. a published calendar).
    today : date-like, optional
        The ingest day (default: today's local date).

    Returns
    -------
    pandas.DataFrame
        Columns variable (str), period (canonical label), release (datetime64[s]), value (float64),
        sorted by variable, period, release, without duplicate rows. ``attrs["freqs"]`` maps
        variable to frequency; ``attrs["source"]`` is the name used in messages.

    Raises
    ------
    InputError
        Naming file, line and field of the first bad cell (in reading order), for: a missing
        column, an unsafe variable name, an unparsable period or release date, a blank,
        non-numeric, NaN or infinite value, a control character in a cell, non-ASCII digits,
        a year outside 1800-2200, a period of the wrong frequency for the variable, a variable
        with mixed frequencies, a release dated on or before the end of its reference period
        (unless ``allow_early``) or more than a year after ``today`` (unless ``allow_future``),
        duplicate cells with different values.
    """
    known = known or {}
    new_meta = new_meta or {}
    src = source or df.attrs.get("source") or "<table>"
    allow_early = allow_early or bool(df.attrs.get("allow_early"))
    expected = df.attrs.get("expected_freq")
    period_field = df.attrs.get("period_field", "period")
    missing = [c for c in REQUIRED if c not in df.columns]
    if missing:
        raise InputError(f"missing column(s) {missing}; need {list(REQUIRED)}, got {sorted(map(str, df.columns))}",
                         file=src, field=missing[0])
    n = len(df)
    if n == 0:
        raise InputError("no rows to ingest", file=src)
    lines = df["_line"].to_numpy(dtype=np.int64) if "_line" in df else np.arange(1, n + 1)
    fields = df["_field"].to_numpy(dtype=object) if "_field" in df else None

    def where(i: int, field: str) -> dict:
        if fields is not None and field in ("value", "release"):
            field = fields[i]
        elif field == "period":
            field = period_field
        return {"file": src, "line": int(lines[i]), "field": field}

    # --- cell checks: report the first bad cell in reading order, whatever its kind
    cells = {c: _text_cells(df[c]) for c in REQUIRED}
    control = {c: _control_chars(cells[c], n) for c in REQUIRED}
    var_codes, var_names, var_bad = _check_variables(df["variable"], cells["variable"])
    ords, freq = parse_periods(_padded(cells["period"], df["period"]))
    period_bad = freq == ""
    rel_days, rel_bad = _parse_releases(df["release"], cells["release"])
    val, val_blank, val_nonnum, val_nonfinite = _parse_values(df["value"], cells["value"])

    def ctl(c: str):
        return lambda i: f"{c} cell {_show(_cell(df[c], i))} holds a control character; remove it"

    checks = [  # column order breaks ties on one row
        (control["variable"], "variable", ctl("variable")),
        (var_bad, "variable", lambda i: f"variable name {_show(_cell(df['variable'], i))} is not a safe "
                                        f"identifier ({_SAFE_RULE})"),
        (control["period"], "period", ctl("period")),
        (period_bad, "period", lambda i: f"cannot parse period {_show(_cell(df['period'], i))}: "
                                         f"{period_problem(_cell(df['period'], i))}"),
        (control["release"], "release", ctl("release")),
        (rel_bad, "release", lambda i: f"cannot parse release date {_show(_cell(df['release'], i))}; "
                                       f"expected YYYY-MM-DD in ASCII digits, years {YEAR_MIN}-{YEAR_MAX}"),
        (control["value"], "value", ctl("value")),
        (val_blank, "value", lambda i: "value is blank; leave the row out instead"),
        (val_nonnum, "value", lambda i: f"value {_show(_cell(df['value'], i))} is not a number"),
        (val_nonfinite, "value", lambda i: f"value {_show(_cell(df['value'], i))} is NaN or infinite; "
                                           "leave the cell out instead"),
    ]
    firsts = [(int(np.argmax(m)), k) for k, (m, _, _) in enumerate(checks) if m.any()]
    if firsts:
        i, k = min(firsts)
        _, field, message = checks[k]
        raise InputError(message(i), **where(i, field))

    # --- one frequency per variable, and the one the store, the caller or the file expects
    n_var = len(var_names)
    first_row = np.full(n_var, n, dtype=np.int64)
    np.minimum.at(first_row, var_codes, np.arange(n))
    var_freq = freq[first_row]
    mixed = freq != var_freq[var_codes]
    if mixed.any():
        i = int(np.argmax(mixed))
        name = var_names[var_codes[i]]
        fs = sorted({str(f) for f in freq[var_codes == var_codes[i]]})
        raise InputError(f"variable {name!r} mixes frequencies {fs} (line {int(lines[first_row[var_codes[i]]])} "
                         f"is {_fname(var_freq[var_codes[i]])}); one variable has one frequency", **where(i, "period"))
    freqs: dict[str, str] = {}
    for k, name in enumerate(var_names):
        want, why = _required_freq(name, known, new_meta, expected, src)
        if want is not None and var_freq[k] != want:
            i = int(first_row[k])
            raise InputError(f"period {_show(_cell(df['period'], i))} is {_fname(var_freq[k])} but variable "
                             f"{name!r} is {_fname(want)} ({why})", **where(i, "period"))
        freqs[name] = str(var_freq[k])

    # --- no value published before its period is over
    ends = np.empty(n, dtype="datetime64[D]")
    for f in ("Q", "M"):
        s = freq == f
        if s.any():
            ends[s] = period_end(ords[s], f)
    if not allow_early:
        early = rel_days <= ends
        if early.any():
            i = int(np.argmax(early))
            raise InputError(f"release date {rel_days[i]} is not after the end of period "
                             f"{_cell(df['period'], i)!s} ({ends[i]}); a value cannot be published before "
                             "its period ends (allow it for forecasts-as-data with --allow-early)",
                             **where(i, "release"))
    if not allow_future:
        day = pd.Timestamp(today if today is not None else _dt.date.today()).normalize()
        limit = np.datetime64((day + pd.DateOffset(years=1)).date(), "D")
        future = rel_days > limit
        if future.any():
            i = int(np.argmax(future))
            raise InputError(f"release date {rel_days[i]} is more than a year after the ingest day "
                             f"({day.date()}); a release is dated when it is published (allow a published "
                             "calendar with --allow-future)", **where(i, "release"))

    # --- duplicate cells: identical ones collapse, different ones are refused
    # One frequency per variable is settled, so (variable, ordinal, day) identifies a cell.
    keys = pd.DataFrame({"v": var_codes, "o": ords, "r": rel_days.astype(np.int64)})
    dup = keys.duplicated(keep=False).to_numpy()
    keep = np.ones(n, dtype=bool)
    if dup.any():
        d = keys[dup].assign(x=val[dup], pos=np.flatnonzero(dup))
        g = d.groupby(["v", "o", "r"], sort=False)
        first_val = g["x"].transform("first").to_numpy()
        first_pos = g["pos"].transform("first").to_numpy()
        clash = first_val != d["x"].to_numpy()
        if clash.any():
            j = int(np.argmax(clash))
            i, i0 = int(d["pos"].iloc[j]), int(first_pos[j])
            raise InputError(f"duplicate cell {var_names[var_codes[i]]} {_cell(df['period'], i)} released "
                             f"{rel_days[i]} with a different value ({float(val[i])!r} here, {float(val[i0])!r} on line "
                             f"{int(lines[i0])})", **where(i, "value"))
        keep[d["pos"].to_numpy()[first_pos != d["pos"].to_numpy()]] = False

    labels = np.empty(n, dtype=object)
    for f in ("Q", "M"):
        s = freq == f
        if s.any():
            labels[s] = format_periods(ords[s], f)
    order = np.lexsort((rel_days, ords, var_codes))  # var_names are sorted, so codes sort by name
    order = order[keep[order]]
    out = pd.DataFrame({
        "variable": np.asarray(var_names, dtype=object)[var_codes[order]],
        "period": labels[order],
        "release": rel_days[order].astype("datetime64[s]"),
        "value": val[order],
    })
    out.attrs["freqs"] = freqs
    out.attrs["source"] = src
    return out


def _cell(s: pd.Series, i: int):
    v = s.iloc[i]
    if isinstance(v, np.generic):
        v = v.item()  # show 'inf', not 'np.float64(inf)'
    return v.strip(_BLANKS) if isinstance(v, str) else v


def _show(v) -> str:
    """A cell for a message: its repr (control characters escaped), cut to 60 characters."""
    text = repr(v)
    if len(text) <= _SHOW:
        return text
    return f"{text[:_SHOW - 1]}\u2026 ({len(str(v))} characters)"


class _Cells:
    """A text column factorised once: checks run on its distinct cells, results broadcast back.

    Cells stay Python ``str`` objects (a NumPy unicode array would drop trailing NULs); a
    missing cell reads as ``""``.
    """

    def __init__(self, s: pd.Series):
        codes, uniq = pd.factorize(s.to_numpy(dtype=object), use_na_sentinel=True)
        raw = [x if isinstance(x, str) else str(x) for x in uniq] + [""]  # code -1 (missing) -> ""
        self.codes = codes
        self.raw = np.array(raw, dtype=object)
        self.stripped = np.array([x.strip(_BLANKS) for x in raw], dtype=object)

    def rows(self, per_unique: np.ndarray) -> np.ndarray:
        """A per-distinct-cell array broadcast to the rows."""
        return np.asarray(per_unique)[self.codes]


def _text_cells(s: pd.Series) -> _Cells | None:
    return _Cells(s) if _is_text(s) else None


def _padded(cells: _Cells | None, s: pd.Series):
    """A text column with its ASCII blanks stripped (other columns unchanged)."""
    return s if cells is None else cells.rows(cells.stripped)


def _control_chars(cells: _Cells | None, n: int) -> np.ndarray:
    """Mask of text cells holding a control character (non-text columns have none)."""
    if cells is None:
        return np.zeros(n, dtype=bool)
    return cells.rows(np.array([_CONTROL_RE.search(x) is not None for x in cells.raw], dtype=bool))


def _check_variables(s: pd.Series, cells: _Cells | None) -> tuple[np.ndarray, list[str], np.ndarray]:
    """Codes into the sorted distinct names, the names, and a mask of unsafe names."""
    na = np.asarray(pd.isna(s))
    if cells is None:  # a non-text column holds no names
        cells = _Cells(s.astype(str))
        na = np.ones(len(s), dtype=bool)
    present = np.zeros(len(cells.stripped), dtype=bool)
    present[cells.codes] = True  # code -1 marks the last slot, the one of missing cells
    names, inv = np.unique(cells.stripped[present], return_inverse=True)
    to_name = np.full(len(present), -1, dtype=np.int64)
    to_name[present] = inv
    codes = to_name[cells.codes]
    ok = np.array([_safe(str(x)) for x in names], dtype=bool)
    bad = ~ok[codes] | na
    return codes, [str(x) for x in names], bad


def _parse_releases(s: pd.Series, cells: _Cells | None) -> tuple[np.ndarray, np.ndarray]:
    """Release days (datetime64[D]) and a mask of unparsable cells."""
    if isinstance(s.dtype, pd.DatetimeTZDtype):
        s = s.dt.tz_localize(None)  # keep the wall-clock day the publisher wrote
    if pd.api.types.is_datetime64_any_dtype(s.dtype):
        days = s.to_numpy().astype("datetime64[D]")
        return days, np.isnat(days) | _outside_years(days)
    if cells is None:
        return np.full(len(s), np.datetime64("NaT"), "datetime64[D]"), np.ones(len(s), dtype=bool)
    # Dates repeat a great deal: parse each distinct text once.
    uniq = cells.stripped
    ok = np.array([bool(_DATE_CELL.match(u)) and YEAR_MIN <= int(u[:4]) <= YEAR_MAX for u in uniq], dtype=bool)
    parsed = np.full(len(uniq), np.datetime64("NaT"), dtype="datetime64[D]")
    if ok.any():
        ts = pd.to_datetime(pd.Series(uniq[ok], dtype=object), format="ISO8601", errors="coerce")
        parsed[ok] = ts.to_numpy().astype("datetime64[D]")
    days = cells.rows(parsed)
    return days, np.isnat(days) | _outside_years(days)


def _outside_years(days: np.ndarray) -> np.ndarray:
    """Mask of days outside the supported years (NaT is not outside: it is reported as unparsable)."""
    y = days.astype("datetime64[Y]").astype(np.int64) + 1970
    return ~np.isnat(days) & ((y < YEAR_MIN) | (y > YEAR_MAX))


def _parse_values(s: pd.Series, cells: _Cells | None) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Values (float64) and masks: blank, not a number, NaN or infinite."""
    n = len(s)
    no = np.zeros(n, dtype=bool)
    if pd.api.types.is_bool_dtype(s.dtype):
        return np.full(n, np.nan), no, np.ones(n, dtype=bool), no
    if pd.api.types.is_numeric_dtype(s.dtype):
        val = s.to_numpy(dtype=np.float64, na_value=np.nan)
        return val, no, no, ~np.isfinite(val)
    if cells is None:
        return np.full(n, np.nan), no, np.ones(n, dtype=bool), no
    text = cells.stripped
    blank = text == ""
    # Only ASCII decimal numbers reach to_numeric: it must never guess at other spellings.
    number = np.array([_NUMBER.match(x) is not None for x in text], dtype=bool)
    val = np.full(len(text), np.nan)
    if number.any():
        val[number] = pd.to_numeric(pd.Series(text[number], dtype=object), errors="coerce").to_numpy(
            dtype=np.float64, na_value=np.nan)
    word = np.array([x.lower() in _NONFINITE_WORDS for x in text], dtype=bool)
    nonnum = ~number & ~word & ~blank
    nonfinite = (word | (number & ~np.isfinite(val))) & ~blank
    return cells.rows(val), cells.rows(blank), cells.rows(nonnum), cells.rows(nonfinite)


def _required_freq(name: str, known: dict, new_meta: dict, expected: str | None,
                   src: str) -> tuple[str | None, str]:
    """The frequency a variable must have, and where that requirement comes from."""
    reqs = []
    if (known.get(name) or {}).get("freq"):
        reqs.append((known[name]["freq"], known[name].get("_why", "as recorded in the store")))
    if (new_meta.get(name) or {}).get("freq"):
        reqs.append((new_meta[name]["freq"], "as declared for this batch"))
    if expected is not None:
        reqs.append((expected, f"as requested with freq={expected}"))
    for f, why in reqs:
        if f not in FREQS:
            raise InputError(f"unknown frequency {f!r} for variable {name!r} ({why}); expected one of "
                             f"{sorted(FREQS)}", file=src, field="freq")
    if len({f for f, _ in reqs}) > 1:
        said = ", ".join(f"{_fname(f)} {why}" for f, why in reqs)
        raise InputError(f"variable {name!r} is given contradictory frequencies: {said}", file=src, field="freq")
    return (reqs[0][0], reqs[0][1]) if reqs else (None, "")


def _fname(f: str) -> str:
    return {"Q": "quarterly", "M": "monthly"}.get(f, f or "unparsable")


__all__ = ["read_releases", "validate_table", "REQUIRED", "SAFE_NAME"]
