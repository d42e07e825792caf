"""Reference periods as integer ordinals (pandas' own ordinals), parsed and formatted vectorised."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

_Q = re.compile(r"^\s*(\d{4})\s*[-]?\s*[Qq]([1-4])\s*$")
_M = re.compile(r"^\s*(\d{4})[-/M](\d{1,2})\s*$")
_ANY = r"^\s*(?P<y>\d{4})(?:\s*-?\s*[Qq](?P<q>[1-4])|[-/M](?P<m>\d{1,2}))\s*$"


def parse_periods(values) -> tuple[np.ndarray, np.ndarray]:
    """Parse period labels ('2001Q3', '2001-07') to (ordinal int64, freq str) arrays.

    Unparsable labels get freq ``""`` and ordinal ``-1``; callers report them.
    Ordinals equal ``pandas.Period(label).ordinal`` for the same frequency.
    """
    s = pd.Series(values, dtype="object")
    if len(s) and isinstance(s.iloc[0], pd.Period):
        freq = np.array([_freq_of_period(p) for p in s], dtype=object)
        ords = np.array([p.ordinal for p in s], dtype=np.int64)
        return ords, freq.astype(str)
    parts = s.astype(str).str.extract(_ANY)
    y = pd.to_numeric(parts["y"], errors="coerce")
    q = pd.to_numeric(parts["q"], errors="coerce")
    m = pd.to_numeric(parts["m"], errors="coerce")
    isq = q.notna().to_numpy()
    ism = (m.notna() & (m >= 1) & (m <= 12)).to_numpy()
    yv = y.fillna(0).to_numpy(np.int64)
    ords = np.full(len(s), -1, dtype=np.int64)
    ords[isq] = (yv[isq] - 1970) * 4 + q.to_numpy()[isq].astype(np.int64) - 1
    ords[ism] = (yv[ism] - 1970) * 12 + m.to_numpy()[ism].astype(np.int64) - 1
    freq = np.where(isq, "Q", np.where(ism, "M", ""))
    return ords, freq


def _freq_of_period(p: pd.Period) -> str:
    name = p.freqstr.upper()
    if name.startswith("Q"):
        return "Q"
    if name.startswith("M"):
        return "M"
    return ""


def format_periods(ordinals, freq: str) -> np.ndarray:
    """Format ordinals of one frequency as labels ('2001Q3' or '2001-07')."""
    o = np.asarray(ordinals, dtype=np.int64)
    if freq == "Q":
        y, r = np.divmod(o, 4)
        return np.char.add(np.char.add((y + 1970).astype(str), "Q"), (r + 1).astype(str))
    y, r = np.divmod(o, 12)
    return np.char.add(np.char.add((y + 1970).astype(str), "-"), np.char.zfill((r + 1).astype(str), 2))


def period_index(ordinals, freq: str) -> pd.PeriodIndex:
    """A pandas PeriodIndex from ordinals of one frequency."""
    return pd.PeriodIndex.from_ordinals(np.asarray(ordinals, dtype=np.int64), freq=freq)


def period_end(ordinals, freq: str) -> np.ndarray:
    """Last calendar day of each period, as datetime64[D]."""
    o = np.asarray(ordinals, dtype=np.int64)
    months_per = 3 if freq == "Q" else 1
    start_next = (o + 1) * months_per  # months since 1970-01
    return start_next.astype("datetime64[M]").astype("datetime64[D]") - np.timedelta64(1, "D")


def period_of_date(dates, freq: str) -> np.ndarray:
    """Ordinal of the period that contains each date."""
    m = np.asarray(dates, dtype="datetime64[D]").astype("datetime64[M]").astype(np.int64)
    return m // 3 if freq == "Q" else m
