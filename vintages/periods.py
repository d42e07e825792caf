"""Reference periods as integer ordinals (pandas' own ordinals), parsed and formatted vectorised.

Accepted labels: quarterly ``2001Q3`` (also ``2001-Q3``, ``2001 q3``), monthly ``2001-07``
(also ``2001-7``, ``2001/07``, ``2001M07``), or :class:`pandas.Period` objects of frequency
``Q-DEC`` or ``M``. Ordinals count periods from 1970Q1 / 1970-01, exactly as
``pandas.Period(label, freq).ordinal`` does, so they can be handed to
``pandas.PeriodIndex.from_ordinals``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

_ANY = r"^\s*(?P<y>\d{4})(?:\s*-?\s*[Qq](?P<q>[1-4])|[-/M](?P<m>\d{1,2}))\s*$"


def parse_periods(values) -> tuple[np.ndarray, np.ndarray]:
    """Parse period labels ('2001Q3', '2001-07') to (ordinal int64, freq str) arrays.

    Parameters
    ----------
    values : array-like
        Labels (str), :class:`pandas.Period` objects, or a period-dtype array.

    Returns
    -------
    ordinals : numpy.ndarray of int64, shape (n,)
        ``pandas.Period(label, freq).ordinal``; ``-1`` where unparsable (check ``freq``, since
        ``-1`` is also the valid ordinal of 1969Q4 and 1969-12).
    freq : numpy.ndarray of str, shape (n,)
        ``"Q"``, ``"M"`` or ``""`` (unparsable: callers report it).
    """
    dtype = getattr(values, "dtype", None)
    if isinstance(dtype, pd.PeriodDtype):
        # A period-dtype column: one frequency for all, ordinals are stored as they are.
        arr = pd.array(values)
        f = _freq_code(dtype.freq)
        ords = np.asarray(arr.asi8, dtype=np.int64).copy()
        bad = np.asarray(pd.isna(arr))
        freq = np.full(len(ords), f, dtype="<U1")
        freq[bad] = ""
        ords[bad | (f == "")] = -1
        return ords, freq
    # Labels repeat a great deal in a release log (one per release), so parse each distinct
    # label once and broadcast back: this is what keeps ingest and cube builds fast.
    codes, uniq = pd.factorize(np.asarray(values, dtype=object), use_na_sentinel=True)
    u_ords, u_freq = _parse_unique(np.asarray(uniq, dtype=object))
    u_ords = np.append(u_ords, -1)  # slot for missing labels (code -1)
    u_freq = np.append(u_freq, "")
    return u_ords[codes], u_freq[codes]


def _parse_unique(uniq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Parse distinct labels (str or Period objects)."""
    n = len(uniq)
    ords = np.full(n, -1, dtype=np.int64)
    freq = np.full(n, "", dtype="<U1")
    is_p = np.array([isinstance(x, pd.Period) for x in uniq], dtype=bool)
    for i in np.flatnonzero(is_p):
        f = _freq_code(uniq[i].freq)
        if f:
            ords[i], freq[i] = uniq[i].ordinal, f
    txt = ~is_p
    if txt.any():
        parts = pd.Series(uniq[txt], dtype=object).astype(str).str.extract(_ANY)
        y = pd.to_numeric(parts["y"], errors="coerce").fillna(0).to_numpy(np.int64)
        q = pd.to_numeric(parts["q"], errors="coerce").to_numpy(np.float64)
        m = pd.to_numeric(parts["m"], errors="coerce").to_numpy(np.float64)
        isq = ~np.isnan(q)
        ism = ~np.isnan(m) & (m >= 1) & (m <= 12)
        o = np.full(int(txt.sum()), -1, dtype=np.int64)
        o[isq] = (y[isq] - 1970) * 4 + q[isq].astype(np.int64) - 1
        o[ism] = (y[ism] - 1970) * 12 + m[ism].astype(np.int64) - 1
        ords[txt] = o
        freq[txt] = np.where(isq, "Q", np.where(ism, "M", ""))
    return ords, freq


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

    Raises
    ------
    ValueError
        When ``freq`` is not one of ``"M"``, ``"Q"``.
    """
    _check_freq(freq)
    o = np.asarray(ordinals, dtype=np.int64)
    if freq == "Q":
        y, r = np.divmod(o, 4)
        return np.char.add(np.char.add((y + 1970).astype(str), "Q"), (r + 1).astype(str))
    y, r = np.divmod(o, 12)
    return np.char.add(np.char.add((y + 1970).astype(str), "-"), np.char.zfill((r + 1).astype(str), 2))


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
