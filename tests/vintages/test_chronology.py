"""Tests of vintages.chronology: reading chronologies, regimes, and Harding-Pagan dating.

Sources: Harding & Pagan (2002), J. Monetary Economics 49(2), 365-381 (quarterly BBQ rules:
local extremum over +-2 quarters, alternation, minimum phase 2 and cycle 5 quarters); the
recession convention "after the peak through the trough" is common practice (NBER-style).
The chronology data here are invented (Veldmark).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from vintages import chronology as ch
from vintages.errors import InputError


def _write(tmp_path, text, name="veldmark_cycles.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


# --------------------------------------------------------------------------- read_chronology


def test_read_chronology_with_open_recession(tmp_path):
    """Quarter labels parse to Periods; a trailing empty trough is an open recession."""
    p = _write(tmp_path, "peak,trough\n2001Q1,2001Q4\n\n2008Q2,2009Q2\n2020Q4,\n")
    chron = ch.read_chronology(p)
    assert str(chron["peak"].dtype) == "period[Q-DEC]"
    assert list(chron["peak"].astype(str)) == ["2001Q1", "2008Q2", "2020Q4"]
    assert chron["trough"].isna().tolist() == [False, False, True]


@pytest.mark.parametrize("text,line,field,words", [
    ("start,end\n2001Q1,2001Q4\n", 1, "peak", "missing column"),
    ("peak,trough\n2001Q1,2001Q4\n2008Q5,2009Q2\n", 3, "peak", "cannot read peak"),
    ("peak,trough\n2001Q1,2001Q4\n\n2008Q2,2008Q1\n", 4, "trough", "not after peak"),
    ("peak,trough\n2001Q1,2001Q4\n2001Q3,2002Q2\n", 3, "peak", "previous trough"),
    ("peak,trough\n2001Q1,\n2008Q2,2009Q2\n", 2, "trough", "only the last row"),
    ("peak,trough\n2001Q1,2001Q4\n2008-06,2009-06\n", 3, "peak", "mixes frequencies"),
    ("peak,trough\n2001Q1,2001Q4\n,2009Q2\n", 3, "peak", "only the first row"),
])
def test_read_chronology_errors_name_file_line_field(tmp_path, text, line, field, words):
    """Each malformed file raises InputError naming the file, the 1-based line and the field."""
    p = _write(tmp_path, text)
    with pytest.raises(InputError) as err:
        ch.read_chronology(p)
    e = err.value
    assert (e.file, e.line, e.field) == (str(p), line, field)
    assert words in str(e) and "veldmark_cycles.csv" in str(e)


def test_read_chronology_missing_file(tmp_path):
    """A missing file is an InputError naming it."""
    with pytest.raises(InputError, match="not found"):
        ch.read_chronology(tmp_path / "none.csv")


# --------------------------------------------------------------------------- regimes


def test_regimes_quarterly_after_peak_through_trough(tmp_path):
    """Recession = quarters after the peak through the trough (common practice)."""
    chron = ch.read_chronology(_write(tmp_path, "peak,trough\n2008Q2,2009Q2\n2012Q1,\n"))
    q = pd.period_range("2008Q1", "2012Q3", freq="Q")
    reg = ch.regimes(chron, q)
    rec = set(reg[reg == "recession"].index.astype(str))
    assert rec == {"2008Q3", "2008Q4", "2009Q1", "2009Q2", "2012Q2", "2012Q3"}
    assert reg[pd.Period("2008Q2", "Q")] == "expansion"


def test_regimes_monthly_periods_from_quarterly_chronology(tmp_path):
    """Months map by their own end: 2008-06 (peak quarter) expansion, 2008-07 to 2009-06 recession."""
    chron = ch.read_chronology(_write(tmp_path, "peak,trough\n2008Q2,2009Q2\n"))
    m = pd.period_range("2008-05", "2009-08", freq="M")
    reg = ch.regimes(chron, m)
    assert reg[pd.Period("2008-06", "M")] == "expansion"
    assert reg[pd.Period("2008-07", "M")] == "recession"
    assert reg[pd.Period("2009-06", "M")] == "recession"
    assert reg[pd.Period("2009-07", "M")] == "expansion"
    assert (reg == "recession").sum() == 12


def test_regimes_leading_open_peak(tmp_path):
    """A first row without a peak makes the sample open in recession."""
    chron = ch.read_chronology(_write(tmp_path, "peak,trough\n,2001Q2\n2003Q1,2003Q3\n"))
    reg = ch.regimes(chron, pd.period_range("2000Q3", "2003Q4", freq="Q"))
    assert list(reg.iloc[:4]) == ["recession"] * 4 and reg.iloc[4] == "expansion"


# --------------------------------------------------------------------------- Harding-Pagan


def _series(values, start="2000Q1"):
    return pd.Series(np.asarray(values, dtype=float),
                     index=pd.period_range(start, periods=len(values), freq="Q"))


def _turns(chron):
    return (list(chron["peak"].dropna().astype(str)), list(chron["trough"].dropna().astype(str)))


def test_harding_pagan_constructed_series():
    """Turning points of a piecewise-linear path are found at the kinks (t = 10, 14, 26, 29)."""
    steps = [1.0] * 10 + [-1.0] * 4 + [1.0] * 12 + [-1.0] * 3 + [1.0] * 10
    y = np.concatenate([[0.0], np.cumsum(steps)])
    chron = ch.harding_pagan(_series(y))
    idx = pd.period_range("2000Q1", periods=y.size, freq="Q")
    assert _turns(chron) == ([str(idx[10]), str(idx[26])], [str(idx[14]), str(idx[29])])
    # and the regimes of the dated cycle are exactly the falling quarters
    reg = ch.regimes(chron, idx)
    falling = np.flatnonzero(np.diff(y) < 0) + 1
    assert set(np.flatnonzero(reg.to_numpy() == "recession")) == set(falling)


def test_harding_pagan_min_phase_enforced():
    """A one-quarter phase (peak at 20, trough at 21) is removed with min_phase=2, kept with 1."""
    y = list(range(21)) + [15.0, 17.0] + [18.5 + 1.5 * i for i in range(10)]
    s = _series(y)
    assert _turns(ch.harding_pagan(s)) == ([], [])
    idx = s.index.astype(str)
    assert _turns(ch.harding_pagan(s, min_phase=1)) == ([idx[20]], [idx[21]])


def test_harding_pagan_min_cycle_enforced():
    """A 4-quarter peak-to-peak cycle loses its lower peak and the trough between (min_cycle=5)."""
    y = list(range(11)) + [8, 7, 8.5, 9.5, 8, 6, 4, 3, 4, 6] + [8 + 2 * i for i in range(10)]
    s = _series(y)
    idx = s.index.astype(str)
    assert _turns(ch.harding_pagan(s)) == ([idx[10]], [idx[18]])
    assert _turns(ch.harding_pagan(s, min_cycle=4)) == ([idx[10], idx[14]], [idx[12], idx[18]])


@settings(max_examples=60, deadline=None)
@given(st.integers(0, 10_000), st.integers(12, 120))
def test_harding_pagan_rules_hold_on_random_walks(seed, n):
    """On any random walk the dated points alternate, respect min phase/cycle and are local extrema."""
    rng = np.random.default_rng(seed)
    y = np.cumsum(rng.normal(0.1, 1.0, n))
    chron = ch.harding_pagan(_series(y))
    ords = pd.period_range("2000Q1", periods=n, freq="Q").asi8
    points = []
    for _, row in chron.iterrows():
        if not pd.isna(row["peak"]):
            points.append((int(np.flatnonzero(ords == row["peak"].ordinal)[0]), 1))
        if not pd.isna(row["trough"]):
            points.append((int(np.flatnonzero(ords == row["trough"].ordinal)[0]), -1))
    t = [p[0] for p in points]
    k = [p[1] for p in points]
    assert t == sorted(t)
    assert all(k[i] != k[i + 1] for i in range(len(k) - 1))
    assert all(t[i + 1] - t[i] >= 2 for i in range(len(t) - 1))
    assert all(t[i + 2] - t[i] >= 5 for i in range(len(t) - 2))
    for ti, ki in points:
        assert 2 <= ti <= n - 3
        window = np.delete(y[ti - 2: ti + 3], 2)
        assert (ki * (y[ti] - window) > 0).all()


def test_harding_pagan_rejects_gaps_and_missing_values():
    """Missing values and non-consecutive periods are refused with a clear message."""
    s = _series(np.arange(12.0))
    s.iloc[3] = np.nan
    with pytest.raises(ValueError, match="missing value"):
        ch.harding_pagan(s)
    with pytest.raises(ValueError, match="PeriodIndex"):
        ch.harding_pagan(pd.Series(np.arange(12.0)))
