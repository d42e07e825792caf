"""Readers and validation: every malformed input is refused with one line naming file, line and
field, and the store's files stay byte-identical.

Sources for the conventions checked here:

* CSV records, the optional header as the first line, and quoted fields that hold line breaks:
  Shafranovich (2005), "Common Format and MIME Type for Comma-Separated Values (CSV) Files",
  IETF RFC 4180, section 2. Counting lines from 1 with the header as line 1 is common practice
  (it is what editors and ``grep -n`` show); expected line numbers are found independently by
  searching the file's text (:func:`line_of`).
* Release dates: the calendar date in ISO 8601 extended format ``YYYY-MM-DD`` (ISO 8601:2004,
  section 4.1.2.2).
* Period ordinals and the last day of a period: pandas (``pandas.Period.ordinal``,
  ``pandas.Period.end_time``) as the reference library.
* "A value cannot be published before its reference period has ended" and "one variable has one
  frequency": common practice for statistical releases (forecasts-as-data are the exception,
  allowed explicitly).
"""

from __future__ import annotations

import hashlib
import pickle
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vintages import InputError, VintageStore, read_releases, validate_table
from vintages.periods import parse_periods, period_end

SEED_CSV = """variable,period,release,value
gdp,2019Q4,2020-01-30,100.0
gdp,2019Q4,2020-03-01,100.5
gdp,2020Q1,2020-04-30,99.0
cpi,2020-01,2020-02-14,1.5
cpi,2020-02,2020-03-13,1.7
"""


def snapshot(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> digest)."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def line_of(text: str, needle: str) -> int:
    """1-based physical line of the first line containing ``needle`` (an independent reference)."""
    hits = [k for k, ln in enumerate(text.split("\n"), start=1) if needle in ln]
    assert hits, f"test bug: {needle!r} not in the file"
    return hits[0]


@pytest.fixture
def store(tmp_path) -> VintageStore:
    seed = tmp_path / "seed.csv"
    seed.write_text(SEED_CSV)
    st = VintageStore.init(tmp_path / "store")
    st.append(read_releases(seed))
    return st


def write(tmp_path: Path, name: str, text: str | bytes) -> Path:
    p = tmp_path / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text)
    return p


def refused(st: VintageStore, path: Path, *, line: int | None, field: str | None, says: str,
            allow_early: bool = False, **read_kw) -> InputError:
    """Ingest ``path`` and check the refusal: one line, where it points, the store untouched."""
    before = snapshot(st.path)
    with pytest.raises(InputError) as info:
        st.append(read_releases(path, **read_kw), allow_early=allow_early)
    err = info.value
    msg = str(err)
    assert "\n" not in msg and "\r" not in msg
    assert (err.file, err.line, err.field) == (str(path), line, field), msg
    where = [str(path)] + ([f"line {line}"] if line is not None else []) + \
        ([f"field '{field}'"] if field is not None else [])
    assert msg.startswith(", ".join(where) + ": "), msg
    assert says in msg, msg
    assert snapshot(st.path) == before
    return err


# ---------------------------------------------------------------- unreadable, empty, header


def test_refuses_file_that_is_not_utf8(store, tmp_path):
    """A file with a non-UTF-8 byte is unreadable, and the message names the line of that byte."""
    data = b"variable,period,release,value\ngdp,2020Q2,2020-07-30,1\ngdp,2020Q3,2020-10-30,\xff1\n"
    p = write(tmp_path, "latin.csv", data)
    refused(store, p, line=3, field=None, says="not UTF-8")


def test_refuses_corrupt_parquet(store, tmp_path):
    """Bytes that are not Parquet give an InputError naming the file, not a pyarrow traceback."""
    p = write(tmp_path, "broken.parquet", b"PAR1 this is not really parquet")
    refused(store, p, line=None, field=None, says="cannot read Parquet file")


@pytest.mark.parametrize("kind", ["missing", "directory"])
def test_refuses_missing_file_or_directory(store, tmp_path, kind):
    """A path that is not a regular file is refused before anything is read."""
    p = tmp_path / "nothing.csv"
    if kind == "directory":
        p.mkdir()
    refused(store, p, line=None, field=None, says="not a regular file")


@pytest.mark.parametrize("text", ["", "\n\n  \n"])
def test_refuses_empty_file(store, tmp_path, text):
    """An empty (or whitespace-only) file is refused as empty."""
    p = write(tmp_path, "empty.csv", text)
    refused(store, p, line=None, field=None, says="file is empty")


def test_refuses_header_without_rows(store, tmp_path):
    """A header and only blank lines is refused: there is nothing to ingest."""
    p = write(tmp_path, "header.csv", "variable,period,release,value\n\n,,,\n")
    refused(store, p, line=None, field=None, says="no data rows")


def test_refuses_missing_column(store, tmp_path):
    """A long table without a 'value' column is refused at the header line (line 1)."""
    p = write(tmp_path, "nocol.csv", "variable,period,release,amount\ngdp,2020Q2,2020-07-30,1\n")
    err = refused(store, p, line=1, field="value", says="missing column(s) ['value']")
    assert "got ['amount', 'period', 'release', 'variable']" in str(err)


def test_refuses_duplicate_column(store, tmp_path):
    """Two columns with one name are ambiguous and refused at the header line."""
    p = write(tmp_path, "dupcol.csv", "variable,period,release,value,value\ngdp,2020Q2,2020-07-30,1,2\n")
    refused(store, p, line=1, field="value", says="duplicate column")


# ---------------------------------------------------------------- cells of a long table


def _long_with(bad_row: str) -> str:
    return ("variable,period,release,value\n"
            "gdp,2020Q2,2020-07-30,1.0\n"
            f"{bad_row}\n"
            "gdp,2020Q3,2020-10-30,2.0\n")


@pytest.mark.parametrize("cell", ["abc", "1,5", "0x10", "1.2.3"])
def test_refuses_non_numeric_value(store, tmp_path, cell):
    """A value that is not a decimal number is refused at its line, field 'value'."""
    row = f'gdp,2020Q4,2021-01-30,"{cell}"'
    text = _long_with(row)
    p = write(tmp_path, "nonnum.csv", text)
    refused(store, p, line=line_of(text, "2020Q4"), field="value", says="is not a number")


def test_refuses_blank_value(store, tmp_path):
    """A row with a blank value (but other cells filled) is refused: leave the row out instead."""
    text = _long_with("gdp,2020Q4,2021-01-30,")
    p = write(tmp_path, "blank.csv", text)
    refused(store, p, line=line_of(text, "2020Q4"), field="value", says="value is blank")


@pytest.mark.parametrize("cell", ["nan", "NaN", "inf", "-inf", "Infinity", "1e999"])
def test_refuses_nan_and_inf(store, tmp_path, cell):
    """NaN and infinite values (IEEE 754 specials, and overflow to inf) are refused."""
    text = _long_with(f"gdp,2020Q4,2021-01-30,{cell}")
    p = write(tmp_path, "nonfinite.csv", text)
    refused(store, p, line=line_of(text, "2020Q4"), field="value", says="NaN or infinite")


@pytest.mark.parametrize("cell", ["2020Q5", "2020-13", "20Q1", "2020", "Q1 2020", ""])
def test_refuses_unparsable_period(store, tmp_path, cell):
    """Period labels other than YYYYQn / YYYY-MM are refused at their line, field 'period'."""
    text = _long_with(f"gdp,{cell},2021-01-30,3.0")
    p = write(tmp_path, "period.csv", text)
    refused(store, p, line=line_of(text, "2021-01-30"), field="period", says="cannot parse period")


@pytest.mark.parametrize("cell", ["2021/01/30", "30.01.2021", "2021-01", "2021-02-30", "20210130", "soon", ""])
def test_refuses_unparsable_release_date(store, tmp_path, cell):
    """Release dates that are not ISO 8601 calendar days (incl. month-only and impossible days) are refused."""
    text = _long_with(f"gdp,2020Q4,{cell},3.0")
    p = write(tmp_path, "date.csv", text)
    refused(store, p, line=line_of(text, "2020Q4"), field="release", says="cannot parse release date")


@pytest.mark.parametrize("name", ["../x", "real gdp", "gdp/x", "1gdp", "gdp-x", "a" * 65, "dé"])
def test_refuses_unsafe_variable_name(store, tmp_path, name):
    """Variable names that could escape a path or break a column name are refused, field 'variable'."""
    text = _long_with(f"{name},2020Q4,2021-01-30,3.0")
    p = write(tmp_path, "name.csv", text)
    refused(store, p, line=line_of(text, "2020Q4"), field="variable", says="not a safe identifier")


def test_refuses_empty_variable_name(store, tmp_path):
    """An empty variable cell in an otherwise filled row is refused as an unsafe (empty) name."""
    text = _long_with(",2020Q4,2021-01-30,3.0")
    p = write(tmp_path, "noname.csv", text)
    refused(store, p, line=line_of(text, "2020Q4"), field="variable", says="not a safe identifier")


def test_reports_first_bad_cell_in_reading_order(store, tmp_path):
    """With several bad cells, the one met first when reading the file is reported."""
    text = ("variable,period,release,value\n"
            "gdp,2020Q2,2020-07-30,oops\n"
            "../x,2020Q3,2020-10-30,1\n")
    p = write(tmp_path, "two.csv", text)
    refused(store, p, line=line_of(text, "oops"), field="value", says="is not a number")


# ---------------------------------------------------------------- frequency and timing


def test_refuses_wrong_frequency_for_known_variable(store, tmp_path):
    """A monthly label for 'gdp', quarterly in the store, is refused at its line, field 'period'."""
    text = "variable,period,release,value\ngdp,2020-07,2020-08-30,1.0\n"
    p = write(tmp_path, "freq.csv", text)
    refused(store, p, line=2, field="period", says="is monthly but variable 'gdp' is quarterly (as recorded in the store)")


def test_refuses_wrong_frequency_given_by_reader(store, tmp_path):
    """freq='M' given to the reader refuses quarterly labels of a new variable."""
    text = "variable,period,release,value\nexports,2020Q2,2020-07-30,1.0\n"
    p = write(tmp_path, "freq2.csv", text)
    refused(store, p, line=2, field="period", says="is quarterly but variable 'exports' is monthly", freq="M")


def test_refuses_contradictory_frequency(store, tmp_path):
    """freq='M' for a variable the store holds as quarterly is a contradiction, reported once."""
    text = "variable,period,release,value\ngdp,2020-07,2020-08-30,1.0\n"
    p = write(tmp_path, "freq3.csv", text)
    refused(store, p, line=None, field="freq", says="contradictory frequencies", freq="M")


def test_refuses_mixed_frequency_variable(store, tmp_path):
    """A new variable with quarterly and monthly labels is refused at the first label of the other kind."""
    text = ("variable,period,release,value\n"
            "exports,2020Q2,2020-07-30,1.0\n"
            "exports,2020-08,2020-09-30,1.0\n")
    p = write(tmp_path, "mixed.csv", text)
    refused(store, p, line=3, field="period", says="mixes frequencies ['M', 'Q']")


@pytest.mark.parametrize("label,freq", [("2020Q2", "Q"), ("2020-02", "M"), ("2019Q4", "Q"), ("2020-12", "M")])
def test_release_on_last_day_of_period_is_early(store, tmp_path, label, freq):
    """A release dated on the period's last day (pandas Period.end_time) is refused; the next day is fine."""
    last_day = pd.Period(label, freq=freq).end_time.normalize()
    assert np.datetime64(last_day.date(), "D") == period_end(parse_periods([label])[0], freq)[0]
    var = "gdp" if freq == "Q" else "cpi"
    text = f"variable,period,release,value\n{var},{label},{last_day.date()},9.0\n"
    p = write(tmp_path, "early.csv", text)
    refused(store, p, line=2, field="release", says="is not after the end of period")
    ok = write(tmp_path, "ontime.csv", text.replace(str(last_day.date()), str((last_day + pd.Timedelta(days=1)).date())))
    assert store.append(read_releases(ok)).written == 1


def test_allow_early_accepts_release_inside_period(store, tmp_path):
    """allow_early accepts a value published before its period ends (forecasts-as-data)."""
    p = write(tmp_path, "fcast.csv", "variable,period,release,value\ngdp,2020Q4,2020-11-15,2.0\n")
    refused(store, p, line=2, field="release", says="--allow-early")
    res = store.append(read_releases(p), allow_early=True)
    assert res.written == 1
    assert store.cube().asof("2020-11-15")["gdp"].loc[pd.Period("2020Q4", "Q")] == 2.0


# ---------------------------------------------------------------- duplicates


def test_refuses_duplicate_cells_with_different_values(store, tmp_path):
    """Two values for one (variable, period, release) in one batch are refused at the second one."""
    text = ("variable,period,release,value\n"
            "gdp,2020Q2,2020-07-30,1.0\n"
            "gdp,2020Q3,2020-10-30,2.0\n"
            "gdp,2020Q2,2020-07-30,1.0\n"
            "gdp,2020Q2,2020-07-30,1.25\n")
    p = write(tmp_path, "dups.csv", text)
    err = refused(store, p, line=line_of(text, "1.25"), field="value", says="duplicate cell gdp 2020Q2")
    assert "(1.25 here, 1.0 on line 2)" in str(err)


def test_identical_duplicates_collapse(store, tmp_path):
    """The same cell written twice with the same value is one value (no error, one row)."""
    p = write(tmp_path, "same.csv", "variable,period,release,value\ngdp,2020Q2,2020-07-30,1.0\n"
                                    "gdp,2020Q2,2020-07-30,1.0\n")
    assert store.append(read_releases(p)).written == 1


# ---------------------------------------------------------------- line numbers


def test_line_numbers_count_blank_lines(store, tmp_path):
    """Blank lines are skipped but counted, so the reported line is the file's physical line."""
    text = ("variable,period,release,value\n\n"
            "gdp,2020Q2,2020-07-30,1.0\n\n\n"
            "gdp,2020Q3,2020-10-30,bad\n")
    p = write(tmp_path, "blanks.csv", text)
    refused(store, p, line=line_of(text, "bad"), field="value", says="is not a number")


def test_line_numbers_with_quoted_line_breaks(store, tmp_path):
    """A quoted field holding line breaks (RFC 4180 section 2, rule 6) shifts later lines correctly."""
    text = ('variable,period,release,value,note\n'
            'gdp,2020Q2,2020-07-30,1.0,"first line\nsecond line\nthird"\n'
            'gdp,2020Q3,2020-10-30,bad,plain\n')
    p = write(tmp_path, "quoted.csv", text)
    refused(store, p, line=line_of(text, "bad"), field="value", says="is not a number")


def test_refuses_row_with_too_many_fields(store, tmp_path):
    """A data row longer than the header (RFC 4180 section 2, rule 4: same field count) is refused at its line."""
    text = ("variable,period,release,value,note\n"
            'gdp,2020Q2,2020-07-30,1.0,"a note\nover two lines"\n'
            "gdp,2020Q3,2020-10-30,2,0,extra\n")
    p = write(tmp_path, "long_row.csv", text)
    refused(store, p, line=line_of(text, "extra"), field=None, says="row has 6 fields but the header has 5")


def test_parquet_line_is_row_number(store, tmp_path):
    """For Parquet input the reported 'line' is the 1-based row number."""
    df = pd.DataFrame({"variable": ["gdp", "gdp", "gdp"], "period": ["2020Q2", "2020Q3", "2020Q4"],
                       "release": ["2020-07-30", "2020-10-30", "2021-01-30"], "value": [1.0, np.inf, 2.0]})
    p = tmp_path / "rows.parquet"
    df.to_parquet(p)
    refused(store, p, line=2, field="value", says="NaN or infinite")


def test_in_memory_table_rows_count_from_one(store):
    """A DataFrame given to append directly is reported as '<table>', rows counted from 1."""
    df = pd.DataFrame({"variable": ["gdp", "gdp"], "period": ["2020Q2", "2020Qx"],
                       "release": ["2020-07-30", "2020-10-30"], "value": [1.0, 2.0]})
    before = snapshot(store.path)
    with pytest.raises(InputError) as info:
        store.append(df)
    assert str(info.value).startswith("<table>, line 2, field 'period': ")
    assert snapshot(store.path) == before


def test_parquet_and_csv_read_the_same(tmp_path):
    """One table written as CSV and as Parquet (typed columns) validates to the same rows."""
    df = pd.DataFrame({"variable": ["gdp", "cpi", "gdp"], "period": ["2020Q2", "2020-05", "2020Q3"],
                       "release": pd.to_datetime(["2020-07-30", "2020-06-12", "2020-10-30"]),
                       "value": [1.25, -0.5, 3.0]})
    df.to_parquet(tmp_path / "a.parquet")
    df.assign(release=df["release"].dt.strftime("%Y-%m-%d")).to_csv(tmp_path / "a.csv", index=False)
    a = validate_table(read_releases(tmp_path / "a.parquet"))
    b = validate_table(read_releases(tmp_path / "a.csv"))
    pd.testing.assert_frame_equal(a, b)
    assert a.attrs["freqs"] == {"cpi": "M", "gdp": "Q"}


@pytest.mark.parametrize("label,freq", [("2001Q3", "Q"), ("1969Q4", "Q"), ("1970Q1", "Q"), ("2001-07", "M"),
                                        ("1955-01", "M"), ("2099-12", "M"), ("2001-Q3", "Q"), ("2001M7", "M")])
def test_period_ordinals_match_pandas(label, freq):
    """Parsed ordinals equal pandas.Period(label, freq).ordinal (the reference library)."""
    ords, freqs = parse_periods([label])
    canonical = label.replace("-Q", "Q").replace("M7", "-07")
    assert freqs[0] == freq
    assert ords[0] == pd.Period(canonical, freq=freq).ordinal


def test_fiscal_quarter_periods_are_refused():
    """pandas Periods of fiscal quarters (Q-NOV) have other ordinals and are not accepted as 'Q'."""
    ords, freqs = parse_periods([pd.Period("2020Q1", freq="Q-NOV"), pd.Period("2020Q1", freq="Q-DEC")])
    assert list(freqs) == ["", "Q"]
    assert ords[1] == pd.Period("2020Q1", freq="Q").ordinal


# ---------------------------------------------------------------- the triangle layout

# A hand-made release triangle in the layout of Croushore and Stark (2001), "A real-time data
# set for macroeconomists", Journal of Econometrics 105(1), 111-130: rows are reference
# periods, columns are vintages (release dates), a blank cell is "not yet published".
TRIANGLE = """period,2020-04-30,2020-05-29,2020-07-30,2020-08-28,2020-10-30
2019Q4,101.0,101.5,101.5,102.0,102.0
2020Q1,95.0,94.0,94.0,93.5,93.5
2020Q2,,,88.0,89.0,89.25
2020Q3,,,,,97.0
"""
# Read off the table by hand (first = first filled cell of the row, second = next one, latest =
# last one; a re-publication of an unchanged value counts as a release, as in the triangle):
FIRST = {"2019Q4": 101.0, "2020Q1": 95.0, "2020Q2": 88.0, "2020Q3": 97.0}
SECOND = {"2019Q4": 101.5, "2020Q1": 94.0, "2020Q2": 89.0, "2020Q3": np.nan}
LATEST = {"2019Q4": 102.0, "2020Q1": 93.5, "2020Q2": 89.25, "2020Q3": 97.0}
# What a forecaster knew on 2020-08-01 (after the 2020-07-30 release, before 2020-08-28):
ASOF_0801 = {"2019Q4": 101.5, "2020Q1": 94.0, "2020Q2": 88.0}


def test_triangle_first_second_latest_estimates(tmp_path):
    """A hand-made triangle ingested gives the first, second and latest estimates read off by hand."""
    p = write(tmp_path, "gdp_triangle.csv", TRIANGLE)
    st = VintageStore.init(tmp_path / "store")
    res = st.append(read_releases(p, layout="triangle", variable="out"))
    assert res.written == 5 + 5 + 3 + 1  # the filled cells, row by row
    cube = st.cube()
    for k, want in ((1, FIRST), (2, SECOND)):
        got = cube.estimate(k, "Q").sel(variable="out").to_series()
        got.index = got.index.astype(str)
        pd.testing.assert_series_equal(got[list(want)], pd.Series(want), check_names=False)
    latest = cube.latest("Q").sel(variable="out").to_series()
    latest.index = latest.index.astype(str)
    pd.testing.assert_series_equal(latest[list(LATEST)], pd.Series(LATEST), check_names=False)
    known = cube.asof("2020-08-01")["out"]
    assert dict(zip(known.index.astype(str), known.to_numpy(), strict=True)) == ASOF_0801


def test_triangle_value_error_names_release_column(store, tmp_path):
    """In a triangle a bad value's field is its release-date column header and its line the row's line."""
    text = TRIANGLE.replace("89.0", "n/a")
    p = write(tmp_path, "tri_bad.csv", text)
    refused(store, p, line=line_of(text, "n/a"), field="2020-08-28", says="is not a number",
            layout="triangle", variable="out")


def test_triangle_early_release_names_release_column(store, tmp_path):
    """A triangle value published before its period ended names the release-date column."""
    text = TRIANGLE.replace("2020Q3,,,,,97.0", "2020Q3,,,,1.0,97.0")
    p = write(tmp_path, "tri_early.csv", text)
    refused(store, p, line=line_of(text, "2020Q3"), field="2020-08-28", says="is not after the end of period",
            layout="triangle", variable="out")


def test_triangle_period_error_names_period_column(store, tmp_path):
    """A bad period label in a triangle names the first column's header as the field."""
    text = TRIANGLE.replace("2020Q2,", "2020 second,")
    p = write(tmp_path, "tri_period.csv", text)
    refused(store, p, line=line_of(text, "2020 second"), field="period", says="cannot parse period",
            layout="triangle", variable="out")
    text = text.replace("period,", "quarter,", 1)
    p = write(tmp_path, "tri_period2.csv", text)
    refused(store, p, line=line_of(text, "2020 second"), field="quarter", says="cannot parse period",
            layout="triangle", variable="out")


@pytest.mark.parametrize("header", ["2020-13-01", "30/04/2020", "latest", "2020-04"])
def test_triangle_header_must_be_release_date(store, tmp_path, header):
    """A triangle column header that is not an ISO 8601 calendar day is refused at line 1."""
    text = TRIANGLE.replace("2020-05-29", header)
    p = write(tmp_path, "tri_header.csv", text)
    refused(store, p, line=1, field=header, says="is not a release date", layout="triangle", variable="out")


def test_triangle_duplicate_release_column(store, tmp_path):
    """Two columns for one release date are refused at the header line."""
    text = TRIANGLE.replace("2020-05-29", "2020-04-30")
    p = write(tmp_path, "tri_dup.csv", text)
    refused(store, p, line=1, field="2020-04-30", says="duplicate column", layout="triangle", variable="out")


@pytest.mark.parametrize("name", ["../etc", "two words", ""])
def test_triangle_variable_name_checked(store, tmp_path, name):
    """The variable named for a triangle must be a safe identifier."""
    p = write(tmp_path, "tri.csv", TRIANGLE)
    refused(store, p, line=None, field="variable", says="not a safe identifier", layout="triangle", variable=name)


def test_triangle_needs_variable_and_csv(store, tmp_path):
    """A triangle without a variable name, or as Parquet, is refused with a message saying why."""
    p = write(tmp_path, "tri.csv", TRIANGLE)
    refused(store, p, line=None, field=None, says="name it", layout="triangle")
    pq_path = tmp_path / "tri.parquet"
    pd.DataFrame({"period": ["2020Q1"], "2020-04-30": [1.0]}).to_parquet(pq_path)
    refused(store, pq_path, line=None, field=None, says="long layout", layout="triangle", variable="out")


def test_unknown_layout_and_frequency_options(store, tmp_path):
    """Unknown layout or frequency options are refused, listing the valid ones sorted."""
    p = write(tmp_path, "a.csv", SEED_CSV)
    refused(store, p, line=None, field=None, says="expected one of ['long', 'sdmx-csv', 'triangle']", layout="wide")
    refused(store, p, line=None, field=None, says="expected one of ['M', 'Q']", freq="A")


def test_byte_order_mark_and_crlf_line_endings(store, tmp_path):
    """A UTF-8 byte-order mark and CRLF line ends (as spreadsheet programs write) keep header and lines right."""
    text = "variable,period,release,value\r\ngdp,2020Q2,2020-07-30,1.0\r\ngdp,2020Q3,2020-10-30,x\r\n"
    p = write(tmp_path, "excel.csv", "\ufeff".encode() + text.encode())
    refused(store, p, line=3, field="value", says="is not a number")
    ok = write(tmp_path, "excel_ok.csv", "\ufeff".encode() + text.replace(",x", ",2.0").encode())
    assert store.append(read_releases(ok)).written == 2


def test_input_error_survives_pickling():
    """An InputError sent between processes keeps its message, file, line and field."""
    err = InputError("value 'x' is not a number", file="a.csv", line=3, field="value")
    back = pickle.loads(pickle.dumps(err))
    assert str(back) == str(err) == "a.csv, line 3, field 'value': value 'x' is not a number"
    assert (back.file, back.line, back.field) == ("a.csv", 3, "value")
