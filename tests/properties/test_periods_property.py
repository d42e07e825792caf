"""Laws of period labels (hypothesis): what parses reads back as the same period; what is not
plain ASCII in the supported years never parses.

Reference: pandas (``pandas.Period(label, freq).ordinal``) for the ordinal of a canonical label;
the Unicode Standard's decimal digits (general category Nd), drawn with ``unicodedata`` from the
Python standard library, for the digits that must be refused.
"""

from __future__ import annotations

import sys
import unicodedata

import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from vintages.periods import NO_PERIOD, YEAR_MAX, YEAR_MIN, format_periods, parse_periods

# Every non-ASCII decimal digit of this Python's Unicode database (about 600 characters).
NON_ASCII_DIGITS = [chr(c) for c in range(sys.maxunicode + 1)
                    if unicodedata.category(chr(c)) == "Nd" and not chr(c).isascii()]
# Characters a period label is made of, plus near misses (other digits, blanks, separators).
ALPHABET = st.sampled_from(list("0123456789QqM-/ \t") + ["\x00", "\n", "\u00a0", "\u3000", "\uff31"]
                           + NON_ASCII_DIGITS[:40])


def _near_valid():
    """Valid labels with one character replaced, inserted or dropped: most hit the parser's edges."""
    valid = st.builds(lambda y, q, m, k: [f"{y}Q{q}", f"{y}-{m:02d}", f"{y}M{m}", f"{y}-Q{q}"][k],
                      st.integers(1700, 2300), st.integers(1, 4), st.integers(1, 12), st.integers(0, 3))
    return st.builds(lambda s, i, c, op: (s[:i] + c + s[i + 1:], s[:i] + c + s[i:], s[:i] + s[i + 1:])[op],
                     valid, st.integers(0, 7), ALPHABET, st.integers(0, 2))


@settings(max_examples=250, deadline=None)
@given(st.one_of(st.text(ALPHABET, min_size=0, max_size=12), _near_valid()))
def test_whatever_parses_reads_back_as_itself(text):
    """Any string that parses is ASCII, lies in 1800-2200, and format -> parse gives the same period."""
    ords, freq = parse_periods([text])
    if not freq[0]:
        assert ords[0] == NO_PERIOD
        return
    assert text.isascii()
    label = format_periods(ords, freq[0])[0]
    again_o, again_f = parse_periods([label])
    assert (again_o[0], again_f[0]) == (ords[0], freq[0])
    p = pd.Period(label, freq=freq[0])  # the reference library reads the canonical label alike
    assert p.ordinal == ords[0] and YEAR_MIN <= p.year <= YEAR_MAX


@settings(max_examples=150, deadline=None)
@given(st.integers(YEAR_MIN, YEAR_MAX), st.integers(1, 12), st.sampled_from(["Q", "M"]),
       st.sampled_from(["{y}Q{q}", "{y}-Q{q}", "{y} q{q}", "{y}-{m:02d}", "{y}-{m}", "{y}/{m:02d}", "{y}M{m:02d}"]))
def test_every_supported_period_parses_to_pandas_ordinal(year, month, freq, form):
    """Each accepted spelling of every period in 1800-2200 parses to pandas' ordinal."""
    is_q = "Q" in form or "q" in form
    label = form.format(y=year, q=(month - 1) // 3 + 1, m=month)
    ords, freqs = parse_periods([label])
    f = "Q" if is_q else "M"
    canonical = f"{year}Q{(month - 1) // 3 + 1}" if is_q else f"{year}-{month:02d}"
    assert freqs[0] == f and ords[0] == pd.Period(canonical, freq=f).ordinal


@settings(max_examples=150, deadline=None)
@given(st.integers(YEAR_MIN, YEAR_MAX), st.integers(1, 4), st.integers(0, 5),
       st.sampled_from(NON_ASCII_DIGITS))
def test_any_non_ascii_digit_is_refused(year, quarter, position, digit):
    """Replacing any digit of a valid label by a non-ASCII decimal digit makes it unparsable."""
    label = list(f"{year}Q{quarter}")
    pos = [0, 1, 2, 3, 5][position % 5]
    label[pos] = digit
    assert parse_periods(["".join(label)])[1][0] == ""


@settings(max_examples=80, deadline=None)
@given(st.one_of(st.integers(0, YEAR_MIN - 1), st.integers(YEAR_MAX + 1, 9999)), st.integers(1, 12))
def test_years_outside_the_range_never_parse(year, month):
    """A four-digit (zero-padded) year outside 1800-2200 is refused in every spelling."""
    for label in (f"{year:04d}Q{(month - 1) // 3 + 1}", f"{year:04d}-{month:02d}", f"{year:04d}M{month}"):
        assert parse_periods([label])[1][0] == ""
