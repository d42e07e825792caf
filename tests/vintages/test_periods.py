"""Period labels: ASCII digits only, years 1800-2200, ordinals equal to pandas' own.

Sources: pandas (``pandas.Period(label, freq).ordinal`` and ``Period.end_time``) is the
reference library for ordinals and period ends. The non-ASCII digits used here are decimal
digits of the Unicode Standard (general category Nd) outside ASCII: full-width digits
U+FF10-U+FF19 (block "Halfwidth and Fullwidth Forms") and Arabic-Indic digits U+0660-U+0669
(block "Arabic"); ``unicodedata.digit`` (Python standard library) confirms their values, so the
test shows that they would have been read as a year.
"""

from __future__ import annotations

import unicodedata

import numpy as np
import pandas as pd
import pytest

from vintages.periods import (
    NO_PERIOD,
    YEAR_MAX,
    YEAR_MIN,
    format_periods,
    parse_periods,
    period_end,
    period_problem,
)

FULL_WIDTH_2024 = "\uff12\uff10\uff12\uff14"
ARABIC_INDIC_2024 = "\u0662\u0660\u0662\u0664"


def test_non_ascii_digits_are_digits_of_2024():
    """The test's non-ASCII strings really are the digits 2, 0, 2, 4 (so refusing them matters)."""
    for text in (FULL_WIDTH_2024, ARABIC_INDIC_2024):
        assert [unicodedata.digit(c) for c in text] == [2, 0, 2, 4]
        assert text.isdigit() and not text.isascii()


@pytest.mark.parametrize("label", [f"{FULL_WIDTH_2024}Q3", f"{ARABIC_INDIC_2024}Q3", f"{FULL_WIDTH_2024}-07",
                                   "2024Q\uff13", "202\uff14-07", "\u0968\u0966\u0968\u096aQ1"])
def test_non_ascii_digits_are_refused(label):
    """Labels with any non-ASCII digit are refused (frequency '', ordinal NO_PERIOD) and the reason says so."""
    ords, freq = parse_periods([label])
    assert freq[0] == "" and ords[0] == NO_PERIOD
    assert "ASCII" in period_problem(label)


@pytest.mark.parametrize("label,year", [("0999Q1", "0999"), ("0000Q1", "0000"), ("1799Q4", "1799"),
                                        ("2201-01", "2201"), ("1799-12", "1799"), ("9999Q4", "9999")])
def test_years_outside_the_range_are_refused(label, year):
    """Years before 1800 or after 2200 (zero-padded ones included) are refused with the range in the reason."""
    ords, freq = parse_periods([label])
    assert freq[0] == "" and ords[0] == NO_PERIOD
    assert period_problem(label) == f"year {year} is outside the supported years {YEAR_MIN}-{YEAR_MAX}"


@pytest.mark.parametrize("label,freq", [("1800Q1", "Q"), ("2200Q4", "Q"), ("1800-01", "M"), ("2200-12", "M"),
                                        ("1959Q1", "Q"), ("1969Q4", "Q"), ("1969-12", "M"), ("1959-01", "M")])
def test_range_ends_and_years_before_1970_match_pandas(label, freq):
    """The first and last supported periods, and periods before 1970, get pandas' ordinals."""
    ords, freqs = parse_periods([label])
    assert freqs[0] == freq
    assert ords[0] == pd.Period(label, freq=freq).ordinal
    assert format_periods(ords, freq)[0] == label


def test_minus_one_is_a_period_not_a_failure():
    """1969Q4 has ordinal -1 (pandas) and parses; a refused label has NO_PERIOD, never -1."""
    ords, freqs = parse_periods(["1969Q4", "1969-12", "garbage"])
    assert ords.tolist()[:2] == [pd.Period("1969Q4", "Q").ordinal, pd.Period("1969-12", "M").ordinal] == [-1, -1]
    assert freqs.tolist() == ["Q", "M", ""] and ords[2] == NO_PERIOD


@pytest.mark.parametrize("label", ["2024Q3\x00", "\x002024Q3", "2024\nQ3", "2024Q3\u00a0", "\u30002024Q3",
                                   "2024Q3\u2028"])
def test_control_characters_and_unicode_blanks_are_refused(label):
    """Only ASCII spaces and tabs may pad a label; NUL, line breaks and Unicode blanks are refused."""
    assert parse_periods([label])[1][0] == ""
    assert period_problem(label) != ""


def test_ascii_padding_is_accepted():
    """A label padded with ASCII spaces or tabs parses as the bare label."""
    ords, freqs = parse_periods([" 2024Q3\t", "\t2024-07 "])
    assert freqs.tolist() == ["Q", "M"]
    assert ords.tolist() == [pd.Period("2024Q3", "Q").ordinal, pd.Period("2024-07", "M").ordinal]


def test_pandas_periods_outside_the_range_are_refused():
    """pandas Period objects and period arrays outside 1800-2200 are refused like labels."""
    ords, freqs = parse_periods([pd.Period("1750Q1", "Q"), pd.Period("2000-01", "M")])
    assert freqs.tolist() == ["", "M"] and ords[0] == NO_PERIOD
    idx = pd.period_range("1799Q3", periods=3, freq="Q")
    ords, freqs = parse_periods(idx)
    assert freqs.tolist() == ["", "", "Q"] and ords[2] == pd.Period("1800Q1", "Q").ordinal


def test_format_zero_pads_years():
    """format_periods writes four-digit years even below 1000 (so nothing reads 0999 as 999)."""
    assert format_periods([pd.Period("0999Q1", "Q").ordinal], "Q").tolist() == ["0999Q1"]
    assert format_periods([pd.Period("0970-01", "M").ordinal], "M").tolist() == ["0970-01"]


def test_period_end_before_1970_matches_pandas():
    """The last day of periods before 1970 equals pandas' Period.end_time (negative ordinals)."""
    for label, freq in (("1959Q1", "Q"), ("1959-02", "M"), ("1969Q4", "Q")):
        o, _ = parse_periods([label])
        want = np.datetime64(pd.Period(label, freq=freq).end_time.date(), "D")
        assert period_end(o, freq)[0] == want
