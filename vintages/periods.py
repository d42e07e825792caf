"""Reference periods as integer ordinals (pandas' own ordinals), parsed and formatted vectorised.

Accepted labels: quarterly ``2001Q3`` (also ``2001-Q3``, ``2001 q3``), monthly ``2001-07``
(also ``2001-7``, ``2001/07``, ``2001M07``), or :class:`pandas.Period` objects of frequency
``Q-DEC`` or ``M``. Ordinals count periods from 1970Q1 / 1970-01, exactly as
``pandas.Period(label, freq).ordinal`` does, so they can be handed to
``pandas.PeriodIndex.from_ordinals``.

What is refused
---------------
* Digits other than ASCII ``0``-``9`` (full-width ``２０２４``, Arabic-Indic ``٢٠٢٤``, ...):
  Python's ``\\d`` would match them and the year would then be misread.
* Years outside :data:`YEAR_MIN`-:data:`YEAR_MAX` (1800-2200), which also refuses zero-padded
  years such as ``0999Q1``: the year is always written with exactly four ASCII digits.
* Whitespace other than ASCII spaces and tabs around or inside a label.

Unparsable labels get frequency ``""`` and the ordinal :data:`NO_PERIOD`, which is never the
ordinal of a period (``-1`` is 1969Q4 and 1969-12, both valid). :func:`period_problem` says
in words why one label was refused, for error messages.

Laws (tested, ``tests/properties/test_periods_property.py``): every label that parses is
read back as the same period after :func:`format_periods`; :func:`format_periods` of a parsed
ordinal is the canonical label (``2001Q3``, ``2001-07``).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

#: First and last calendar years a reference period may lie in (inclusive).
YEAR_MIN, YEAR_MAX = 1800, 2200
#: Ordinal returned for an unparsable label (never a valid ordinal).
NO_PERIOD = np.iinfo(np.int64).min
# Only ASCII digits and ASCII blanks: [0-9] and [ \t], never \d or \s (both match Unicode).
_ANY = r"^[ \t]*(?P<y>[0-9]{4})(?:[ \t]*-?[ \t]*[Qq](?P<q>[1-4])|[-/M](?P<m>[0-9]{1,2}))[ \t]*$"
_SHAPE = re.compile(r"^\s*(\d+)(?:\s*-?\s*[Qq](\d)|[-/M](\d+))\s*$")  # Unicode-tolerant, for messages
_RANGE = {"Q": ((YEAR_MIN - 1970) * 4, (YEAR_MAX - 1970) * 4 + 3),
          "M": ((YEAR_MIN - 1970) * 12, (YEAR_MAX - 1970) * 12 + 11)}


def parse_periods(values) -> tuple[np.ndarray, np.ndarray]:
    """Parse period labels ('2001Q3', '2001-07') to (ordinal int64, freq str) arrays.

    Parameters
    ----------
    values : array-like
        Labels (str), :class:`pandas.Period` objects, or a period-dtype array.

    Returns
    -------
    ordinals : numpy.ndarray of int64, shape (n,)
        ``pandas.Period(label, freq).ordinal``; :data:`NO_PERIOD` where unparsable.
    freq : numpy.ndarray of str, shape (n,)
        ``"Q"``, ``"M"`` or ``""`` (unparsable or out of range: callers report it, e.g. with
        :func:`period_problem`).

    Examples
    --------
    >>> parse_periods(["2001Q3", "1959-01", "0999Q1"])[1].tolist()
    ['Q', 'M', '']
    """
    dtype = getattr(values, "dtype", None)
    if isinstance(dtype, pd.PeriodDtype):
        # A period-dtype column: one frequency for all, ordinals are stored as they are.
        arr = pd.array(values)
        f = _freq_code(dtype.freq)
        ords = np.asarray(arr.asi8, dtype=np.int64).copy()
        bad = np.asarray(pd.isna(arr)) | (f == "")
        if f:
            lo, hi = _RANGE[f]
            bad |= (ords < lo) | (ords > hi)
        freq = np.full(len(ords), f, dtype="<U1")
        freq[bad] = ""
        ords[bad] = NO_PERIOD
        return ords, freq
    # Labels repeat a great deal in a release log (one per release), so parse each distinct
    # label once and broadcast back: this is what keeps ingest and cube builds fast.
    codes, uniq = pd.factorize(np.asarray(values, dtype=object), use_na_sentinel=True)
    u_ords, u_freq = _parse_unique(np.asarray(uniq, dtype=object))
    u_ords = np.append(u_ords, NO_PERIOD)  # slot for missing labels (code -1)
    u_freq = np.append(u_freq, "")
    return u_ords[codes], u_freq[codes]


def _parse_unique(uniq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Parse distinct labels (str or Period objects)."""
    n = len(uniq)
    ords = np.full(n, NO_PERIOD, dtype=np.int64)
    freq = np.full(n, "", dtype="<U1")
    is_p = np.array([isinstance(x, pd.Period) for x in uniq], dtype=bool)
    for i in np.flatnonzero(is_p):
        f = _freq_code(uniq[i].freq)
        if f:
            ords[i], freq[i] = uniq[i].ordinal, f
    is_txt = np.array([isinstance(x, str) for x in uniq], dtype=bool)
    if is_txt.any():
        # Object dtype on purpose: a NumPy unicode array would drop trailing NUL characters.
        parts = pd.Series(uniq[is_txt], dtype=object).str.extract(_ANY)
        ok_y = parts["y"].notna().to_numpy()
        y = np.zeros(len(parts), dtype=np.int64)
        y[ok_y] = parts["y"][ok_y].to_numpy(dtype=object).astype(np.int64)  # ASCII digits only
        q = pd.to_numeric(parts["q"], errors="coerce").to_numpy(np.float64)
        m = pd.to_numeric(parts["m"], errors="coerce").to_numpy(np.float64)
        in_years = ok_y & (y >= YEAR_MIN) & (y <= YEAR_MAX)
        isq = in_years & ~np.isnan(q)
        ism = in_years & ~np.isnan(m) & (m >= 1) & (m <= 12)
        o = np.full(len(parts), NO_PERIOD, dtype=np.int64)
        o[isq] = (y[isq] - 1970) * 4 + q[isq].astype(np.int64) - 1
        o[ism] = (y[ism] - 1970) * 12 + m[ism].astype(np.int64) - 1
        ords[is_txt] = o
        freq[is_txt] = np.where(isq, "Q", np.where(ism, "M", ""))
    for f in ("Q", "M"):  # pandas Periods outside the years are refused like labels
        lo, hi = _RANGE[f]
        out = (freq == f) & ((ords < lo) | (ords > hi))
        ords[out], freq[out] = NO_PERIOD, ""
    return ords, freq


def period_problem(value) -> str:
    """Why one label was refused by :func:`parse_periods`, in words ('' when it parses).

    Examples
    --------
    >>> period_problem("0999Q1")
    'year 0999 is outside the supported years 1800-2200'
    """
    if parse_periods([value])[1][0]:
        return ""
    if isinstance(value, pd.Period):
        if not _freq_code(value.freq):
            return f"period frequency {value.freqstr!r} is not calendar quarters (Q-DEC) or months (M)"
        return f"year {value.year} is outside the supported years {YEAR_MIN}-{YEAR_MAX}"
    if not isinstance(value, str):
        return f"a period label must be text, got {type(value).__name__}"
    if any(ord(c) < 32 or 127 <= ord(c) < 160 for c in value):
        return "the label holds a control character"
    shape = _SHAPE.match(value)
    if shape is None:
        return "expected e.g. 2001Q3 or 2001-07"
    digits = "".join(g for g in shape.groups() if g)
    if not digits.isascii() or not value.isascii():
        return "only ASCII digits 0-9 are accepted (the label holds other characters)"
    if len(shape.group(1)) != 4:
        return "the year must have exactly four digits, e.g. 2001Q3 or 2001-07"
    year = int(shape.group(1))
    if not YEAR_MIN <= year <= YEAR_MAX:
        return f"year {shape.group(1)} is outside the supported years {YEAR_MIN}-{YEAR_MAX}"
    if shape.group(2) is not None:
        return f"quarter {shape.group(2)} is not 1-4"
    return f"month {shape.group(3)} is not 1-12"


def _freq_code(offset) -> str:
    """'Q' for calendar quarters, 'M' for months, '' for anything else (e.g. fiscal quarters)."""
    name = pd.tseries.frequencies.to_offset(offset).freqstr.upper()
    # Fiscal quarters (Q-NOV, ...) or multiples (2M) have other ordinals: not ours.
    if name in ("Q-DEC", "QE-DEC"):
        return "Q"
    if name in ("M", "ME"):
        return "M"
    return ""


def freq_of(obj) -> str | None:
    """The project's frequency code of a period-like object: ``"Q"``, ``"M"`` or ``""``.

    The one place where a frequency is read off pandas objects: a :class:`pandas.Period`, a
    :class:`pandas.PeriodIndex`, a period-dtype Series or array, a :class:`pandas.PeriodDtype`
    or a frequency offset/string. Returns ``""`` for other period frequencies (fiscal
    quarters, multiples such as ``2M``) and ``None`` when ``obj`` carries no period frequency
    at all (e.g. a column of text labels, which :func:`parse_periods` reads instead).

    Examples
    --------
    >>> freq_of(pd.Period("2001Q3", "Q")), freq_of(pd.period_range("2001-01", periods=2, freq="M"))
    ('Q', 'M')
    >>> freq_of(pd.Series(["2001Q3"])) is None
    True
    """
    if isinstance(obj, pd.Period):
        return _freq_code(obj.freq)
    dtype = obj if isinstance(obj, pd.PeriodDtype) else getattr(obj, "dtype", None)
    if isinstance(dtype, pd.PeriodDtype):
        return _freq_code(dtype.freq)
    if dtype is not None:
        return None
    try:
        return _freq_code(obj)
    except (TypeError, ValueError):
        return None


def format_periods(ordinals, freq: str) -> np.ndarray:
    """Format ordinals of one frequency as labels ('2001Q3' or '2001-07').

    Formatting is total (any ordinal gets a label, the year zero-padded to four digits);
    only labels of the years :data:`YEAR_MIN`-:data:`YEAR_MAX` parse back.

    Raises
    ------
    ValueError
        When ``freq`` is not one of ``"M"``, ``"Q"``.
    """
    _check_freq(freq)
    o = np.asarray(ordinals, dtype=np.int64)
    if freq == "Q":
        y, r = np.divmod(o, 4)
        return np.char.add(np.char.add(_years(y), "Q"), (r + 1).astype(str))
    y, r = np.divmod(o, 12)
    return np.char.add(np.char.add(_years(y), "-"), np.char.zfill((r + 1).astype(str), 2))


def _years(y: np.ndarray) -> np.ndarray:
    """Four-digit years (zero-padded), so a label never loses the digits the parser requires."""
    return np.char.zfill((y + 1970).astype(str), 4)


def period_index(ordinals, freq: str) -> pd.PeriodIndex:
    """A pandas PeriodIndex from ordinals of one frequency."""
    _check_freq(freq)
    return pd.PeriodIndex.from_ordinals(np.asarray(ordinals, dtype=np.int64), freq=freq)


def period_end(ordinals, freq: str) -> np.ndarray:
    """Last calendar day of each period, as datetime64[D]."""
    _check_freq(freq)
    o = np.asarray(ordinals, dtype=np.int64)
    months_per = 3 if freq == "Q" else 1
    start_next = (o + 1) * months_per  # months since 1970-01
    return start_next.astype("datetime64[M]").astype("datetime64[D]") - np.timedelta64(1, "D")


def period_of_date(dates, freq: str) -> np.ndarray:
    """Ordinal of the period that contains each date."""
    _check_freq(freq)
    m = np.asarray(dates, dtype="datetime64[D]").astype("datetime64[M]").astype(np.int64)
    return m // 3 if freq == "Q" else m


def _check_freq(freq: str) -> None:
    """Refuse a frequency other than 'M' or 'Q' (silently treating it as monthly would mislead)."""
    if freq not in ("M", "Q"):
        raise ValueError(f"unknown frequency {freq!r}; expected one of ['M', 'Q']")
