"""Reader for SDMX-CSV release files (format 1.0 and 2.0): one file is one vintage.

A statistics office that publishes in SDMX offers each download as SDMX-CSV: one row per
observation, a column per dimension, ``TIME_PERIOD``, the measure ``OBS_VALUE`` and attribute
columns. :func:`read_sdmx_csv` turns one such file into the project's long release table
(``variable, period, release, value``), ready for :func:`vintages.ingest.validate_table` and
:meth:`vintages.store.VintageStore.append`.

Which format version
--------------------
Told apart by the header row, which both versions make mandatory for us (a 1.0 file written
with ``header=absent`` cannot be read without its data structure definition):

* **1.0**: the first column header is ``DATAFLOW`` (SDMX-CSV 1.0 field guide, "Design
  principles", column headers).
* **2.0**: the first column header is ``STRUCTURE`` (optionally ``STRUCTURE[x]``, a sub-field
  separator), the second ``STRUCTURE_ID``; an ``ACTION`` column usually follows, and when it is
  absent the action "Information" is assumed (SDMX-CSV 2.0 field guide, "Column headers (first
  row)" and "Column content").

The field separator is the character that follows the first header term (2.0, "Design
principles"; 1.0 allows a locale's separator such as ``;``). With ``;`` as separator a decimal
comma (``12,4``) is read as a decimal point, as in the 2.0 "Localisation" example.

Headers written with ``labels=both`` (``REF_AREA: Reference area``) are reduced to the component
ID before the first ``": "``, and coded cells (``VM: Veldmark``) to their code, as both field
guides define that form ("Optional parameters", ``labels``). Custom columns and the 2.0
``STRUCTURE_NAME``, ``SERIES_KEY`` and ``OBS_KEY`` columns are ignored unless named below.

Variables: the variable map
---------------------------
Each project variable is one series, chosen by dimension codes (a *selector*). A row belongs
to the variable whose selector it matches (every listed dimension has the listed code; other
dimensions are free). A selector may name any column, ``FREQ`` or ``STRUCTURE_ID`` included.
The map is a dict or a TOML file:

.. code-block:: toml

    # Veldmark statistics office, dataflow VM:NA_MAIN
    [variables]
    gdp = "REF_AREA=VM, INDICATOR=GDP_R"              # selector string
    cpi = { REF_AREA = "VM", INDICATOR = "CPI" }      # or an inline table

    [variables.urate]                                 # or a sub-table
    REF_AREA = "VM"
    INDICATOR = "UR"

As a dict: ``{"gdp": "REF_AREA=VM, INDICATOR=GDP_R"}``, ``{"gdp": {"REF_AREA": "VM", ...}}`` or
keyed by selector, ``{"REF_AREA=VM, INDICATOR=GDP_R": "gdp"}`` (a key holding ``=`` is a
selector, since a variable name never does). Two variables may not share a selector.

A row that matches no selector is an error (naming the dimension whose code the map does not
know, if any) unless ``skip_unmapped=True``; a row that matches two selectors is an error.

Release date
------------
Neither version of SDMX-CSV defines a release-date column: 2.0 lets providers add custom
columns ("Columns": "e.g. updated, prepared"; its "Ordinary case" example carries ``UPDATED``)
and 1.0 likewise ("Design principles": custom columns). So the release date is either given
(``release="2024-11-15"``) or read from a column the user names (``release_column="UPDATED"``,
or any attribute column), holding ISO 8601 dates or date-times; the calendar day as written
is kept (a time of day and a UTC offset are dropped, never converted).

Rows, actions, periods
----------------------
* ``ACTION`` (2.0): ``I`` (information), ``A`` (append) and ``R`` (replace) rows are
  observations published in this vintage. A ``D`` (delete) row anywhere in the file is
  refused, as is any other letter: releases are never deleted, a correction is a new release.
* A row whose measure is empty (or ``NaN``) is *not published* and is dropped before any other
  check: a missing observation, or a 2.0 row carrying attributes of a partial key ("Column
  content": such rows leave other components empty). ``NaN`` for a missing observation is the
  SDMX-ML convention (from memory).
* ``TIME_PERIOD`` follows the SDMX time formats (SDMX 2.1 Section 6 Technical Notes, 4.2 "Time
  and Time Format"): quarterly ``2024-Q3`` (reporting quarter) or ``2024Q3`` (common practice),
  monthly ``2024-07`` (Gregorian year-month, 4.2.4) or ``2024-M07`` (reporting month). A day
  ``2024-07-01`` (``timeFormat=normalized``) is read as the period containing it when the
  frequency is known. Other SDMX periods (years, semesters, weeks, days, date-times, ranges)
  are refused by name. Reporting periods are calendar periods only when the reporting year
  starts on 1 January, so a ``REPORTING_YEAR_START_DAY`` other than ``--01-01`` is refused.
* The expected frequency of each row is its ``FREQ`` code when the file has that dimension
  (``Q`` or ``M``; other codes, or a code contradicting ``freq=``, are refused), else ``freq=``;
  a ``TIME_PERIOD`` of another frequency is refused, as is a variable whose rows mix them.
* The same (variable, period, release) twice in one file is refused, even with equal values.

Where errors point
------------------
Every refusal is one :class:`~vintages.errors.InputError` naming the file (``source`` or the
path), the physical line (header = 1; a quoted field spanning lines is counted correctly) and
the field (the column's component ID). Among several bad rows the first in the file is named.

References
----------
SDMX Technical Working Group, "SDMX-CSV Data Message field guide", format version 1.0 and
version 2.0 (aligned with SDMX 3.0.0), github.com/sdmx-twg/sdmx-csv.
SDMX Technical Working Group (2011), "SDMX 2.1 Standards, Section 6: Technical Notes", 4.2
"Time and Time Format".
"""

from __future__ import annotations

import csv
import io
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from vintages._types import FREQS, Freq
from vintages.errors import InputError
from vintages.ingest import SAFE_NAME
from vintages.periods import format_periods

TIME_PERIOD = "TIME_PERIOD"
OBS_VALUE = "OBS_VALUE"
ACTIONS = ("A", "D", "I", "R")  # SDMX-CSV 2.0, "Column content": the four action types
_FREQ_NAME = {"Q": "quarterly", "M": "monthly"}
_MAP_SRC = "<variable map>"

# First header term and the separator after it; a quoted term is allowed (RFC 4180).
_V1_HEAD = re.compile(r'^(?P<q>"?)DATAFLOW(?P=q)(?P<sep>[^\w"\r\n])')
_V2_HEAD = re.compile(r'^(?P<q>"?)STRUCTURE(?:\[[^\]]*\])?(?P=q)(?P<sep>[^\w"\r\n])')
_V2_FIRST = re.compile(r"^STRUCTURE(?:\[[^\]]*\])?$")

# TIME_PERIOD forms we read (SDMX 2.1 Technical Notes 4.2), checked in this order.
_Q = re.compile(r"^(\d{4})-?Q([1-4])$")
_M_GREG = re.compile(r"^(\d{4})-(\d{2})$")
_M_REP = re.compile(r"^(\d{4})-M(\d{2})$")
_DAY = re.compile(r"^(\d{4})-(\d{2})-(\d{2})$")
# SDMX periods we recognise but do not hold: refused by name, not as "unparsable".
_UNSUPPORTED = (
    (re.compile(r"/"), "a time range"),
    (re.compile(r"^\d{4}-\d{2}-\d{2}T"), "a date-time"),
    (re.compile(r"^\d{4}$"), "annual (Gregorian year)"),
    (re.compile(r"^\d{4}-A1$"), "annual (reporting year)"),
    (re.compile(r"^\d{4}-S[12]$"), "half-yearly (reporting semester)"),
    (re.compile(r"^\d{4}-T[1-3]$"), "four-monthly (reporting trimester)"),
    (re.compile(r"^\d{4}-W\d{2}$"), "weekly (reporting week)"),
    (re.compile(r"^\d{4}-D\d{3}$"), "daily (reporting day)"),
)
_RELEASE_CELL = re.compile(
    r"^(\d{4}-\d{2}-\d{2})(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}:?\d{2})?)?$")
_REPORTING_START = "REPORTING_YEAR_START_DAY"
_NAN_WORDS = ("nan", "+nan", "-nan")

# Kinds of parsed TIME_PERIOD labels.
_K_Q, _K_M, _K_DAY, _K_UNSUPPORTED, _K_BAD, _K_BLANK = range(6)


def read_sdmx_csv(path: str | Path, *, variables: Mapping | str | Path, release=None,
                  release_column: str | None = None, freq: Freq | None = None,
                  source: str | None = None, skip_unmapped: bool = False,
                  measure: str = OBS_VALUE) -> pd.DataFrame:
    """Read one SDMX-CSV file (format 1.0 or 2.0) into the project's long release table.

    Parameters
    ----------
    path : path-like
        The SDMX-CSV file (UTF-8, header row required).
    variables : dict or path-like
        The variable map: which series is which project variable (see the module docstring for
        the dict forms and the TOML file format).
    release : str or date-like, optional
        The release date of every value in the file, ``YYYY-MM-DD``.
    release_column : str, optional
        Instead of ``release``: the column (component ID) holding each row's release date or
        date-time, e.g. a custom ``UPDATED`` column. Exactly one of the two must be given.
    freq : {"Q", "M"}, optional
        Expected frequency of every variable; checked against ``TIME_PERIOD`` (and ``FREQ``).
    source : str, optional
        Name of the file in messages and in ``attrs["source"]``; defaults to ``str(path)``.
    skip_unmapped : bool
        Drop rows that match no variable instead of refusing the file.
    measure : str
        The measure column, ``OBS_VALUE`` unless a 2.0 file has several measures.

    Returns
    -------
    pandas.DataFrame
        One row per published observation, in file order: ``variable`` (str), ``period``
        (``2024Q3`` or ``2024-07``), ``release`` (datetime64[s], the calendar day), ``value``
        (float64) and ``_line`` (int64, the row's first physical line, as
        :func:`vintages.ingest.read_releases` writes it). ``attrs``: ``source``,
        ``expected_freq`` (``freq``) and ``sdmx_csv_version`` (``"1.0"`` or ``"2.0"``).

    Raises
    ------
    InputError
        One line naming file, line and field: unreadable file, header not SDMX-CSV, a missing
        ``TIME_PERIOD``/measure/selected/release column, a row of the wrong length, an unknown
        or delete ``ACTION``, an unmapped or doubly mapped row, a blank, unparsable or
        unsupported ``TIME_PERIOD``, a frequency mismatch, a non-numeric or infinite value, a
        bad release date, a duplicate observation. A malformed variable map names the map.

    Examples
    --------
    >>> df = read_sdmx_csv("vm_gdp_2024-11.csv", variables={"gdp": "REF_AREA=VM, INDICATOR=GDP_R"},
    ...                    release="2024-11-15")  # doctest: +SKIP
    >>> store.append(df)  # doctest: +SKIP
    """
    path = Path(path)
    src = source or str(path)
    if freq is not None and freq not in FREQS:
        raise InputError(f"unknown frequency {freq!r}; expected one of {sorted(FREQS)}", file=src)
    if (release is None) == (release_column is None):
        raise InputError("give the release date either as release=YYYY-MM-DD or as release_column="
                         "COLUMN (SDMX-CSV defines no release-date column)", file=src)
    rel_day = None if release is None else _release_option(release, src)
    entries = read_variable_map(variables) if not isinstance(variables, Mapping) \
        else _map_from_dict(variables)

    text = _read_text(path, src)
    version, sep = _detect(text, src)
    lines, blank = _records(text, sep, src)
    first = next(csv.reader(io.StringIO(text), delimiter=sep))
    header = [_component_id(c.strip(), k) for k, c in enumerate(first)]
    col = _columns(header, version, src, entries, measure, release_column)
    rows = ~blank[1:]  # blank lines are skipped but still counted
    if not rows.any():
        raise InputError("file has a header but no data rows", file=src)
    body = {name: cells[1:][rows] for name, cells in _cells(text, sep, col, len(lines), src).items()}
    out = _rows(body, lines[1:][rows], col, entries, src, sep=sep, rel_day=rel_day,
                release_column=release_column, freq=freq, skip=skip_unmapped, measure=measure)
    out.attrs["source"] = src
    out.attrs["expected_freq"] = freq
    out.attrs["sdmx_csv_version"] = version
    return out


# ---------------------------------------------------------------- the variable map


def read_variable_map(path: str | Path) -> list[tuple[str, dict[str, str]]]:
    """Read a TOML variable map (see the module docstring) into ``[(variable, {dim: code})]``.

    Raises
    ------
    InputError
        Naming the map file, the line of the offending key and the variable: not TOML, no
        ``[variables]`` table, an unknown top-level key, an unsafe variable name, a selector
        that is empty, malformed or not text, two variables with one selector.
    """
    path = Path(path)
    src = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise InputError(f"cannot read variable map: {type(exc).__name__}: {exc.strerror or exc}",
                         file=src) from None
    except UnicodeDecodeError:
        raise InputError("cannot read variable map: not UTF-8 text", file=src) from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column \d+\)", str(exc))
        msg = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        raise InputError(f"variable map is not valid TOML: {msg}", file=src,
                         line=int(m.group(1)) if m else None) from None
    extra = sorted(k for k in raw if k != "variables")
    if extra:
        raise InputError(f"unknown top-level key {extra[0]!r} in the variable map; it holds one "
                         "table, [variables]", file=src, line=_key_line(text, extra[0]),
                         field=extra[0])
    table = raw.get("variables")
    if not isinstance(table, dict) or not table:
        raise InputError("the variable map needs a non-empty [variables] table "
                         '(e.g. gdp = "REF_AREA=VM, INDICATOR=GDP_R")', file=src,
                         line=_key_line(text, "variables"))
    return _entries(list(table.items()), src,
                    lambda name: _key_line(text, name, table="variables"))


def _map_from_dict(variables: Mapping) -> list[tuple[str, dict[str, str]]]:
    """Entries from a dict keyed by variable, or (a key holding '=') by selector."""
    items = []
    for k, v in variables.items():
        if isinstance(k, str) and "=" in k:
            items.append((v, k))  # {selector: variable}
        else:
            items.append((k, v))
    if not items:
        raise InputError("the variable map is empty", file=_MAP_SRC)
    return _entries(items, _MAP_SRC, lambda name: None)


def _entries(items, src: str, line_of) -> list[tuple[str, dict[str, str]]]:
    """Check (variable, selector) pairs; selectors become {dimension: code} dicts."""
    out: list[tuple[str, dict[str, str]]] = []
    seen: dict[tuple, str] = {}
    for name, sel in items:
        if not isinstance(name, str) or SAFE_NAME.fullmatch(name) is None:
            raise InputError(f"variable name {name!r} is not a safe identifier (a letter, then "
                             "letters, digits or '_', at most 64 characters)", file=src,
                             line=line_of(name) if isinstance(name, str) else None,
                             field=str(name))
        where = {"file": src, "line": line_of(name), "field": name}
        dims = _selector(sel, where)
        key = tuple(sorted(dims.items()))
        if key in seen:
            raise InputError(f"variables {seen[key]!r} and {name!r} have the same selector "
                             f"{_show(dims)}", **where)
        seen[key] = name
        out.append((name, dims))
    return out


def _selector(sel, where: dict) -> dict[str, str]:
    """A selector string 'DIM=CODE, DIM=CODE' or a {DIM: CODE} table as a dict."""
    if isinstance(sel, str):
        pairs = []
        for part in sel.split(","):
            dim, eq, code = part.partition("=")
            if not eq:
                raise InputError(f"selector part {part.strip()!r} is not DIMENSION=CODE "
                                 f"(selector {sel!r})", **where)
            pairs.append((dim.strip(), code.strip()))
    elif isinstance(sel, Mapping):
        pairs = list(sel.items())
    else:
        raise InputError(f"selector must be text 'DIM=CODE, ...' or a table of codes, got "
                         f"{type(sel).__name__}", **where)
    if not pairs:
        raise InputError("empty selector: name at least one dimension and its code", **where)
    dims: dict[str, str] = {}
    for dim, code in pairs:
        if not isinstance(code, str):
            raise InputError(f"code of dimension {dim!r} must be text (quote it), got "
                             f"{type(code).__name__} {code!r}", **where)
        if not isinstance(dim, str) or not dim or not code or any(c.isspace() for c in dim + code):
            raise InputError(f"selector entry {dim!r}={code!r} needs a dimension ID and a code, "
                             "without spaces", **where)
        if dim in dims:
            raise InputError(f"dimension {dim!r} is selected twice", **where)
        dims[dim] = code
    return dims


def _key_line(text: str, key: str, table: str | None = None) -> int | None:
    """Best-effort line of ``key = ...`` (inside ``[table]``) or of ``[table.key]``."""
    k = re.escape(key)
    quoted = rf"(?:{k}|\"{k}\"|'{k}')"
    if table is not None:
        sub = re.compile(rf"^\s*\[\s*{re.escape(table)}\s*\.\s*{quoted}\s*\]")
        dotted = re.compile(rf"^\s*{re.escape(table)}\s*\.\s*{quoted}\s*=")
    header = re.compile(rf"^\s*\[\s*{quoted}\s*\]")
    assign = re.compile(rf"^\s*{quoted}\s*[=.]")
    current = None
    for i, ln in enumerate(text.splitlines(), start=1):
        m = re.match(r"^\s*\[\s*([^\]]+?)\s*\]", ln)
        if table is not None and (sub.match(ln) or (current is None and dotted.match(ln))):
            return i
        if table is None and header.match(ln):
            return i
        if m:
            current = m.group(1).strip("\"'")
            continue
        if assign.match(ln) and current == table:
            return i
    return None


def _show(dims: dict[str, str]) -> str:
    return ", ".join(f"{d}={c}" for d, c in dims.items())


# ---------------------------------------------------------------- file, header, cells


def _release_option(release, src: str) -> np.datetime64:
    """The release= option as a day."""
    if isinstance(release, str):
        s = release.strip()
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}", s):
            try:
                return np.datetime64(s, "D")
            except ValueError:
                pass
        raise InputError(f"release={release!r} is not a date YYYY-MM-DD", file=src)
    try:
        day = pd.Timestamp(release)
    except (TypeError, ValueError):
        day = pd.NaT
    if pd.isna(day):
        raise InputError(f"release={release!r} is not a date", file=src)
    return np.datetime64(day.date(), "D")


def _read_text(path: Path, src: str) -> str:
    if not path.is_file():
        raise InputError("file not found or not a regular file", file=src)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {type(exc).__name__}: {exc.strerror or exc}",
                         file=src) from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise InputError(f"cannot read file: not UTF-8 text (byte {data[exc.start]:#04x} at offset "
                         f"{exc.start})", file=src, line=line) from None
    if not text.strip():
        raise InputError("file is empty", file=src)
    return text


def _detect(text: str, src: str) -> tuple[str, str]:
    """Format version ('1.0' or '2.0') and field separator, from the first header term."""
    first = text.split("\n", 1)[0]
    for version, pat in (("1.0", _V1_HEAD), ("2.0", _V2_HEAD)):
        m = pat.match(first)
        if m:
            return version, m.group("sep")
    cell = re.split(r"[,;\t|]", first, maxsplit=1)[0].strip().strip('"')
    raise InputError(f"not an SDMX-CSV header: the first column must be DATAFLOW (SDMX-CSV 1.0) or "
                     f"STRUCTURE (2.0), followed by a separator, got {cell!r} (a file without a "
                     "header row cannot be read)", file=src, line=1, field=cell or None)


def _records(text: str, sep: str, src: str) -> tuple[np.ndarray, np.ndarray]:
    """Each record's first physical line and a blank-line mask; refuse records of another width."""
    if '"' in text:
        # A quoted field may hold separators or line breaks: count the way the csv module reads.
        reader = csv.reader(io.StringIO(text), delimiter=sep)
        starts, widths, prev = [], [], 0
        for row in reader:
            starts.append(prev + 1)
            widths.append(len(row) if len(row) > 1 or any(c.strip() for c in row) else 0)
            prev = reader.line_num
        starts_a, widths_a = np.asarray(starts, dtype=np.int64), np.asarray(widths, dtype=np.int64)
    else:
        starts_a, widths_a = _plain_widths(text, sep)
    width = int(widths_a[0])
    if width < 2:
        raise InputError("the header has a single column", file=src, line=1)
    bad = (widths_a != 0) & (widths_a != width)  # 0 = a blank line, skipped
    if bad.any():
        k = int(np.argmax(bad))
        raise InputError(f"row has {int(widths_a[k])} fields but the header has {width} (RFC 4180: "
                         "every record has the same number of fields)", file=src,
                         line=int(starts_a[k]))
    return starts_a, widths_a == 0


def _plain_widths(text: str, sep: str) -> tuple[np.ndarray, np.ndarray]:
    """Line numbers and field counts (0 for a blank line) of a text without quotes, vectorised."""
    b = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)
    s = sep.encode("utf-8")
    begins = np.concatenate(([0], np.flatnonzero(b == 10) + 1)).astype(np.int64)
    if begins[-1] == len(b):
        begins = begins[:-1]  # the final line break ends the last record
    if len(s) != 1:  # a multi-byte separator: count per line in Python
        lns = text.split("\n")[:len(begins)]
        widths = np.array([ln.count(sep) + 1 if ln.strip() else 0 for ln in lns], dtype=np.int64)
    else:
        # Count separators and blank characters per line from their positions: line k runs from
        # begins[k] to begins[k + 1] (its line break included, a blank character).
        nlines = len(begins)
        length = np.diff(np.append(begins, len(b)))

        def per_line(mask: np.ndarray) -> np.ndarray:
            at = np.searchsorted(begins, np.flatnonzero(mask), side="right") - 1
            return np.bincount(at, minlength=nlines)[:nlines]

        nsep = per_line(b == s[0])
        nblank = per_line((b == 32) | ((b >= 9) & (b <= 13)))
        widths = np.where(nblank < length, nsep + 1, 0)
    return np.arange(1, len(begins) + 1, dtype=np.int64), widths


def _cells(text: str, sep: str, col: dict[str, int], n: int, src: str) -> dict[str, np.ndarray]:
    """The stripped text of the columns we read, one array per column (header record included)."""
    try:
        # header=None: the header is a record like the others, so records and lines stay aligned;
        # dtype=object keeps plain Python strings (no conversion of columns we never read).
        raw = pd.read_csv(io.StringIO(text), sep=sep, dtype=object, keep_default_na=False,
                          na_filter=False, skip_blank_lines=False, header=None, quotechar='"',
                          usecols=sorted(set(col.values())))
    except Exception as exc:  # any reader failure is an input problem of this file
        raise InputError(" ".join(f"cannot read file: {type(exc).__name__}: {exc}".split()),
                         file=src) from None
    if len(raw) != n:  # cannot happen for RFC 4180 input; never point at a wrong line
        raise InputError(f"cannot read file: {len(raw)} records parsed, {n} counted", file=src)
    return {name: _stripped(raw[k]) for name, k in col.items()}


def _component_id(cell: str, k: int) -> str:
    """The component ID of a header cell: labels=both ('ID: Name') and STRUCTURE[x] reduced."""
    if k == 0 and _V2_FIRST.match(cell):
        return "STRUCTURE"
    return cell.split(": ", 1)[0].strip()


def _columns(header: list[str], version: str, src: str, entries, measure: str,
             release_column: str | None) -> dict[str, int]:
    """Positions of the columns we read; refuse a header that lacks one."""
    if version == "2.0" and header[1] != "STRUCTURE_ID":
        raise InputError(f"an SDMX-CSV 2.0 header has STRUCTURE_ID as second column, got "
                         f"{header[1]!r}", file=src, line=1, field=header[1] or None)
    pos: dict[str, int] = {}
    dup: set[str] = set()
    for k, h in enumerate(header):
        if h in pos:
            dup.add(h)
        else:
            pos[h] = k
    got = sorted(h for h in pos if h)
    hint = " (a header written with labels=name has no component IDs: ask for labels=id or both)"
    for name in (TIME_PERIOD, measure):
        if name not in pos:
            raise InputError(f"missing column {name}; got {got}" + hint, file=src, line=1,
                             field=name)
    wanted = [TIME_PERIOD, measure, "ACTION", "FREQ", _REPORTING_START]
    for _, dims in entries:
        for d in dims:
            if d not in pos:
                raise InputError(f"the variable map selects on {d}, which is not a column of this "
                                 f"file; got {got}", file=src, line=1, field=d)
            wanted.append(d)
    if release_column is not None:
        if release_column not in pos:
            raise InputError(f"release column {release_column!r} is not in the header; got {got}",
                             file=src, line=1, field=release_column)
        wanted.append(release_column)
    for name in wanted:
        if name in dup:
            raise InputError(f"column {name} appears twice in the header", file=src, line=1,
                             field=name)
    return {name: pos[name] for name in sorted(set(wanted) & pos.keys(), key=pos.get)}  # header order


def _codes(values: np.ndarray) -> np.ndarray:
    """Coded cells reduced to their code (labels=both writes 'CODE: Name')."""
    # Codes repeat a great deal: reduce each distinct cell once and broadcast back.
    inv, uniq = pd.factorize(values)
    return np.array([u.split(": ", 1)[0] for u in uniq] + [""], dtype=object)[inv]


def _stripped(cells: pd.Series) -> np.ndarray:
    """Cells without surrounding spaces (each distinct cell stripped once; missing ones empty)."""
    inv, uniq = pd.factorize(cells.to_numpy(dtype=object))
    if len(uniq) and max(map(len, uniq)) > 64:  # a fixed-width array of long cells costs memory
        return np.array([u.strip() for u in uniq] + [""], dtype=object)[inv]
    out = np.char.strip(np.append(np.asarray(uniq, dtype=str), ""))  # a C loop
    return out.astype(object)[inv]


# ---------------------------------------------------------------- rows


def _rows(body: dict[str, np.ndarray], lines: np.ndarray, col: dict[str, int], entries,
          src: str, *, sep: str, rel_day, release_column, freq, skip: bool,
          measure: str) -> pd.DataFrame:
    """Check every row, then build the long table of the published observations."""
    n = len(lines)
    names = [name for name, _ in entries]
    checks: list[tuple] = []  # (mask, field or field(i), message(i)); on one row the first wins

    # --- ACTION (2.0): I/A/R publish, D deletes (refused), anything else is not an action
    if "ACTION" in col:
        action = body["ACTION"]
        checks.append((~_isin(action, ACTIONS), "ACTION", lambda i: (
            f"unknown ACTION {action[i]!r}; expected one of {list(ACTIONS)} (SDMX-CSV 2.0)")))
        checks.append((action == "D", "ACTION", lambda i: (
            "a Delete (D) row cannot be ingested: releases are never deleted, a correction is a "
            "new release")))

    # --- a missing observation is not published: dropped before any further check
    raw_val = body[measure]
    val, missing, nonnum = _values(raw_val, sep)
    obs = ~missing

    # --- which variable each row is
    codes = {d: _codes(body[d]) for d in col if any(d in dims for _, dims in entries)}
    sel_dims = list(codes)  # header order
    var, nmatch, unknown = _match(codes, entries)

    def key_of(i: int) -> str:
        return ", ".join(f"{d}={codes[d][i]}" for d in sel_dims)

    if not skip:
        unmatched = obs & (nmatch == 0)
        checks.append((unmatched & (unknown >= 0), lambda i: sel_dims[unknown[i]], lambda i: (
            f"unknown code {codes[sel_dims[unknown[i]]][i]!r} in {sel_dims[unknown[i]]}: the "
            f"variable map knows {_known(entries, sel_dims[unknown[i]])}; map it or skip unmapped "
            "rows (skip_unmapped)")))
        checks.append((unmatched & (unknown < 0), sel_dims[0], lambda i: (
            f"no variable is mapped to this series ({key_of(i)}); map it or skip unmapped rows "
            "(skip_unmapped)")))
    checks.append((obs & (nmatch > 1), sel_dims[0], lambda i: (
        f"this series ({key_of(i)}) matches {int(nmatch[i])} variables of the map: "
        f"{sorted(nm for nm, dims in entries if all(codes[d][i] == c for d, c in dims.items()))}")))
    keep = obs & (nmatch == 1)

    # --- TIME_PERIOD against the expected frequency (FREQ, else freq=)
    expected = np.full(n, freq or "", dtype=object)
    said = np.full(n, f"freq={freq!r}", dtype=object)
    if "FREQ" in col:
        fcode = _codes(body["FREQ"])
        held = _isin(fcode, FREQS)
        checks.append((keep & (fcode == ""), "FREQ", lambda i: "blank FREQ"))
        checks.append((keep & (fcode != "") & ~held, "FREQ", lambda i: (
            f"FREQ {fcode[i]!r} is not held; expected one of {sorted(FREQS)}")))
        if freq:
            checks.append((keep & held & (fcode != freq), "FREQ", lambda i: (
                f"FREQ is {fcode[i]!r} but freq={freq!r} was asked for")))
        expected = np.where(held, fcode, "").astype(object)
        said = np.char.add("FREQ=", fcode.astype(str)).astype(object)
    tp = _codes(body[TIME_PERIOD])
    kind, year, sub, reporting, what = _parse_periods(tp)
    checks.append((keep & (kind == _K_BLANK), TIME_PERIOD, lambda i: "blank TIME_PERIOD"))
    checks.append((keep & (kind == _K_BAD), TIME_PERIOD, lambda i: (
        f"TIME_PERIOD {tp[i]!r} is not an SDMX time period such as 2024-Q3, 2024Q3, 2024-07 or "
        "2024-M07")))
    checks.append((keep & (kind == _K_UNSUPPORTED), TIME_PERIOD, lambda i: (
        f"TIME_PERIOD {tp[i]!r} is {what[i]}; only quarterly and monthly periods are held")))
    pfreq = np.where(kind == _K_Q, "Q", np.where(kind == _K_M, "M", "")).astype(object)
    checks.append((keep & (pfreq != "") & (expected != "") & (pfreq != expected), TIME_PERIOD,
                   lambda i: (f"TIME_PERIOD {tp[i]!r} is {_FREQ_NAME[pfreq[i]]} but the series is "
                              f"{_FREQ_NAME[expected[i]]} ({said[i]})")))
    is_day = kind == _K_DAY
    day_ok = _valid_days(tp, is_day)
    checks.append((keep & is_day & ~day_ok, TIME_PERIOD,
                   lambda i: f"TIME_PERIOD {tp[i]!r} is not a calendar day"))
    checks.append((keep & is_day & day_ok & (expected == ""), TIME_PERIOD, lambda i: (
        f"TIME_PERIOD {tp[i]!r} is a day (timeFormat=normalized): give freq= or a FREQ column to "
        "read it as a quarter or a month")))
    if _REPORTING_START in col:
        start = body[_REPORTING_START]
        checks.append((keep & reporting & (start != "") & (start != "--01-01"), _REPORTING_START,
                       lambda i: (f"the reporting year starts {start[i]!r}, so {tp[i]} is not a "
                                  "calendar period (only --01-01 is held)")))

    # --- values and release dates
    checks.append((keep & nonnum, measure, lambda i: f"value {raw_val[i]!r} is not a number"))
    checks.append((keep & np.isinf(val), measure, lambda i: f"value {raw_val[i]!r} is not finite"))
    if release_column is not None:
        rtext = body[release_column]
        days = _release_days(rtext)
        checks.append((keep & np.isnat(days), release_column, lambda i: (
            f"release date {rtext[i]!r} is not an ISO 8601 date YYYY-MM-DD (optionally with a "
            "time of day)" if rtext[i] else "blank release date")))
    else:
        days = np.full(n, rel_day, dtype="datetime64[D]")

    _raise_first(checks, lines, src)
    idx = np.flatnonzero(keep)
    if not len(idx):
        raise InputError("no published observation of a mapped variable in this file", file=src)

    # --- per variable: one frequency; no observation twice
    v, ln, d = var[idx], lines[idx], days[idx]
    f = np.where(is_day[idx], expected[idx], pfreq[idx]).astype(str)
    first = pd.Series(f).groupby(v).transform("first").to_numpy(dtype=str)
    mixed = f != first
    if mixed.any():
        j = int(np.argmax(mixed))
        j0 = int(np.argmax(v == v[j]))
        raise InputError(f"variable {names[v[j]]!r} mixes frequencies: {_FREQ_NAME[f[j]]} here, "
                         f"{_FREQ_NAME[f[j0]]} on line {int(ln[j0])}", file=src, line=int(ln[j]),
                         field="FREQ" if "FREQ" in col else TIME_PERIOD)
    y, s = year[idx], sub[idx]
    quarter = np.where(is_day[idx], (s - 1) // 3 + 1, s)  # a day's quarter; else s is the quarter
    ords = np.where(f == "Q", (y - 1970) * 4 + quarter - 1, (y - 1970) * 12 + s - 1)
    ords = ords.astype(np.int64)
    labels = np.empty(len(idx), dtype=object)
    for fr in FREQS:
        m = f == fr
        if m.any():
            inv, uniq = pd.factorize(ords[m])  # format each distinct period once
            labels[m] = format_periods(uniq, fr)[inv]
    keys = pd.DataFrame({"v": v, "o": ords, "d": d.astype(np.int64)})
    dup = keys.duplicated(keep="first").to_numpy()
    if dup.any():
        j = int(np.argmax(dup))
        j0 = int(np.argmax((keys == keys.iloc[j]).all(axis=1).to_numpy()))
        raise InputError(f"duplicate observation: {names[v[j]]} {labels[j]} released {d[j]} is "
                         f"also on line {int(ln[j0])}", file=src, line=int(ln[j]),
                         field=TIME_PERIOD)
    return pd.DataFrame({
        "variable": np.asarray(names, dtype=object)[v],
        "period": labels,
        "release": d.astype("datetime64[s]"),
        "value": val[idx],
        "_line": ln,
    })


def _raise_first(checks, lines: np.ndarray, src: str) -> None:
    """Raise the error of the first bad row in the file; on one row, the earlier check wins."""
    best = None
    for mask, field, msg in checks:
        if mask.any():
            i = int(np.argmax(mask))
            if best is None or i < best[0]:
                best = (i, field, msg)
    if best is not None:
        i, field, msg = best
        raise InputError(msg(i), file=src, line=int(lines[i]),
                         field=field(i) if callable(field) else field)


def _match(codes: dict[str, np.ndarray], entries):
    """Per row: the matched entry (-1 if none), how many match, first unknown dimension (-1)."""
    n = len(next(iter(codes.values())))
    var = np.full(n, -1, dtype=np.int64)
    nmatch = np.zeros(n, dtype=np.int64)
    groups: dict[tuple[str, ...], dict[str, int]] = {}
    for j, (_, dims) in enumerate(entries):
        order = tuple(sorted(dims))
        groups.setdefault(order, {})["\x1f".join(dims[x] for x in order)] = j
    # Entries that select on the same dimensions are looked up together: one join per group.
    for order, lookup in groups.items():
        key = pd.Series(codes[order[0]], dtype=object)
        if len(order) > 1:
            key = key.str.cat([pd.Series(codes[x], dtype=object) for x in order[1:]], sep="\x1f")
        hit = key.map(lookup).to_numpy(dtype=np.float64, na_value=np.nan)
        ok = ~np.isnan(hit)
        var[ok] = hit[ok].astype(np.int64)
        nmatch += ok
    unknown = np.full(n, -1, dtype=np.int64)
    dims_order = list(codes)
    for k in range(len(dims_order) - 1, -1, -1):  # the first unknown in header order wins
        unknown[~_isin(codes[dims_order[k]], _known(entries, dims_order[k]))] = k
    return var, nmatch, unknown


def _known(entries, dim: str) -> list[str]:
    return sorted({dims[dim] for _, dims in entries if dim in dims})


def _isin(values: np.ndarray, allowed) -> np.ndarray:
    return pd.Series(values, dtype=object).isin(list(allowed)).to_numpy()


def _parse_periods(tp: np.ndarray):
    """Kind, year, quarter-or-month, reporting-form flag and description, per row."""
    codes, uniq = pd.factorize(pd.Series(tp, dtype=object))
    m = len(uniq)
    kind = np.full(m, _K_BAD, dtype=np.int64)
    year = np.zeros(m, dtype=np.int64)
    sub = np.ones(m, dtype=np.int64)
    reporting = np.zeros(m, dtype=bool)
    what = np.full(m, "", dtype=object)
    for u, s in enumerate(uniq):
        if s == "":
            kind[u] = _K_BLANK
        elif (g := _Q.match(s)) is not None:
            kind[u], year[u], sub[u], reporting[u] = _K_Q, int(g[1]), int(g[2]), True
        elif ((g := _M_GREG.match(s)) or (g := _M_REP.match(s))) and 1 <= int(g[2]) <= 12:
            kind[u], year[u], sub[u] = _K_M, int(g[1]), int(g[2])
            reporting[u] = "M" in s
        elif (g := _DAY.match(s)) is not None:
            kind[u], year[u], sub[u] = _K_DAY, int(g[1]), int(g[2])
        else:
            for pat, desc in _UNSUPPORTED:
                if pat.search(s):
                    kind[u], what[u] = _K_UNSUPPORTED, desc
                    break
    return kind[codes], year[codes], sub[codes], reporting[codes], what[codes]


def _valid_days(tp: np.ndarray, is_day: np.ndarray) -> np.ndarray:
    ok = np.zeros(len(tp), dtype=bool)
    if is_day.any():
        parsed = pd.to_datetime(pd.Series(tp[is_day]), format="%Y-%m-%d", errors="coerce")
        ok[is_day] = parsed.notna().to_numpy()
    return ok


def _values(raw: np.ndarray, sep: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Values (float64) and masks: missing (empty or NaN: not published), not a number."""
    text = pd.Series(raw, dtype=object)
    if sep == ";":
        # Where ';' separates fields, ',' is the locale's decimal mark (SDMX-CSV 2.0,
        # "Localisation" example); a cell with both '.' and ',' stays unreadable on purpose.
        comma = text.str.count(",").eq(1) & ~text.str.contains(".", regex=False)
        text = text.where(~comma, text.str.replace(",", ".", regex=False))
    val = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    missing = np.zeros(len(raw), dtype=bool)
    nan = np.flatnonzero(np.isnan(val))  # few cells: look at each
    missing[nan] = [raw[i] == "" or raw[i].lower() in _NAN_WORDS for i in nan]
    return val, missing, np.isnan(val) & ~missing


def _release_days(text: np.ndarray) -> np.ndarray:
    """The calendar day of each release cell (NaT where it is not an ISO 8601 date)."""
    codes, uniq = pd.factorize(pd.Series(text, dtype=object))
    days = np.full(len(uniq), np.datetime64("NaT"), dtype="datetime64[D]")
    for u, s in enumerate(uniq):
        g = _RELEASE_CELL.match(s)
        if g is not None:
            try:
                days[u] = np.datetime64(g.group(1), "D")
            except ValueError:
                pass  # no such day: stays NaT and is reported
    return days[codes]


__all__ = ["read_sdmx_csv", "read_variable_map", "ACTIONS", "OBS_VALUE", "TIME_PERIOD"]
