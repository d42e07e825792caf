"""Adversarial cells: every input below is either refused with one line naming file, line and
field (the store byte-identical), or accepted and stored as exactly the value written.

Sources: ASCII digits are code points 0x30-0x39 (ANSI X3.4-1986); the other decimal digits
are Unicode general category Nd (the Unicode Standard, chapter 4.6), e.g. full-width U+FF10-19,
Arabic-Indic U+0660-69, Devanagari U+0966-6F. Control characters are Unicode category Cc (C0
U+0000-001F, DEL U+007F, C1 U+0080-009F). ISO 8601:2004 section 4.1.2.2 defines the calendar
date ``YYYY-MM-DD``. RFC 4180 (Shafranovich 2005) section 2 rules 5-7 define quoted fields;
an unterminated quote runs to the end of the file. The expected stored values of accepted
cells are written by hand (the number or period the text spells in ASCII).
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pandas as pd
import pytest

from vintages import InputError, VintageStore, read_releases

FW = str.maketrans("0123456789", "\uff10\uff11\uff12\uff13\uff14\uff15\uff16\uff17\uff18\uff19")
AI = str.maketrans("0123456789", "\u0660\u0661\u0662\u0663\u0664\u0665\u0666\u0667\u0668\u0669")
DV = str.maketrans("0123456789", "\u0966\u0967\u0968\u0969\u096a\u096b\u096c\u096d\u096e\u096f")
TODAY = "2024-12-01"  # the ingest day the future-date rule is checked against


def snapshot(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> digest)."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


# (period, release, value, expected): expected is ("refuse", field) or ("accept", period, release, value)
CASES = [
    # --- periods
    ("2024Q3".translate(FW), "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q3".translate(AI), "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q3".translate(DV), "2024-11-15", "1.5", ("refuse", "period")),
    ("202" + "4".translate(FW) + "Q3", "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q" + "3".translate(FW), "2024-11-15", "1.5", ("refuse", "period")),
    ("0999Q1", "2024-11-15", "1.5", ("refuse", "period")),
    ("0000Q1", "2024-11-15", "1.5", ("refuse", "period")),
    ("1799Q4", "2024-11-15", "1.5", ("refuse", "period")),
    ("2201Q1", "2024-11-15", "1.5", ("refuse", "period")),
    ("02024Q3", "2024-11-15", "1.5", ("refuse", "period")),
    ("+2024Q3", "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q3\x00", "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q3\u00a0", "2024-11-15", "1.5", ("refuse", "period")),
    ("\u30002024Q3", "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q3\x1f", "2024-11-15", "1.5", ("refuse", "period")),
    ("2024Q3 x", "2024-11-15", "1.5", ("refuse", "period")),
    (" 2024Q3\t", "2024-11-15", "1.5", ("accept", "2024Q3", "2024-11-15", 1.5)),
    ("2024q3", "2024-11-15", "1.5", ("accept", "2024Q3", "2024-11-15", 1.5)),
    ("2024-Q3", "2024-11-15", "1.5", ("accept", "2024Q3", "2024-11-15", 1.5)),
    ("1959Q1", "1959-05-15", "1.5", ("accept", "1959Q1", "1959-05-15", 1.5)),
    ("1800Q1", "1800-05-15", "1.5", ("accept", "1800Q1", "1800-05-15", 1.5)),
    ("1969Q4", "1970-01-30", "1.5", ("accept", "1969Q4", "1970-01-30", 1.5)),
    # --- release dates
    ("2024Q3", "2024-11-15".translate(FW), "1.5", ("refuse", "release")),
    ("2024Q3", "2024-11-15".translate(AI), "1.5", ("refuse", "release")),
    ("2024Q3", "2024-11-15\x00", "1.5", ("refuse", "release")),
    ("2024Q3", "2024-11-15\u00a0", "1.5", ("refuse", "release")),
    ("1799Q4", "1799-12-31", "1.5", ("refuse", "period")),
    ("2024Q3", "0999-01-01", "1.5", ("refuse", "release")),
    ("2024Q3", "2201-01-01", "1.5", ("refuse", "release")),
    ("2024Q3", "2026-01-01", "1.5", ("refuse", "release")),  # more than a year after TODAY
    ("2024Q3", "2025-12-01", "1.5", ("accept", "2024Q3", "2025-12-01", 1.5)),  # exactly a year: allowed
    ("2024Q3", "2024-11-15T10:30", "1.5", ("accept", "2024Q3", "2024-11-15", 1.5)),
    # --- values
    ("2024Q3", "2024-11-15", "1.5\x00", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "\x001.5", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5\x1f", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5\x7f", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5\x85", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5\u2028", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5".translate(FW), ("refuse", "value")),
    ("2024Q3", "2024-11-15", "\u0661\u066b\u0665", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "3".translate(AI), ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5\u00a0", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1_000", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1.5e", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "0x1p3", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1,5", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "--1", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "nan", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "-Infinity", ("refuse", "value")),
    ("2024Q3", "2024-11-15", "1e999", ("refuse", "value")),
    ("2024Q3", "2024-11-15", " 1.5\t", ("accept", "2024Q3", "2024-11-15", 1.5)),
    ("2024Q3", "2024-11-15", "+1.5", ("accept", "2024Q3", "2024-11-15", 1.5)),
    ("2024Q3", "2024-11-15", ".5", ("accept", "2024Q3", "2024-11-15", 0.5)),
    ("2024Q3", "2024-11-15", "5.", ("accept", "2024Q3", "2024-11-15", 5.0)),
    ("2024Q3", "2024-11-15", "-2.5E-3", ("accept", "2024Q3", "2024-11-15", -0.0025)),
    ("2024Q3", "2024-11-15", "-0", ("accept", "2024Q3", "2024-11-15", 0.0)),
]
VARIABLE_CASES = [("gdp\x00", ("refuse", "variable")), ("gdp\u00a0", ("refuse", "variable")),
                  ("gdp".translate(str.maketrans("gdp", "\uff47\uff44\uff50")), ("refuse", "variable")),
                  ("\x00", ("refuse", "variable")), ("gdp\t", ("accept", "gdp"))]


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    st = VintageStore.init(tmp_path_factory.mktemp("template") / "store")
    st.append(pd.DataFrame({"variable": ["gdp"], "period": ["2020Q1"], "release": pd.to_datetime(["2020-04-30"]),
                            "value": [100.0]}), {"gdp": {"units": "index"}}, today=TODAY)
    return st.path


@pytest.fixture
def store(template, tmp_path) -> VintageStore:
    return VintageStore(shutil.copytree(template, tmp_path / "store"))


def _file(tmp_path: Path, variable: str, period: str, release: str, value: str) -> Path:
    p = tmp_path / "cells.csv"
    value = f'"{value}"' if "," in value else value  # RFC 4180: a field holding a comma is quoted
    p.write_bytes(("variable,period,release,value\ngdp,2020Q2,2020-07-30,99.0\n"
                   f"{variable},{period},{release},{value}\n").encode())
    return p


def _check(store, path, expected, **kw):
    before = snapshot(store.path)
    if expected[0] == "refuse":
        with pytest.raises(InputError) as info:
            store.append(read_releases(path), today=TODAY, allow_early=True, **kw)
        err = info.value
        assert (err.file, err.line, err.field) == (str(path), 3, expected[1]), str(err)
        assert "\n" not in str(err) and "\r" not in str(err) and "\u2028" not in str(err)
        assert str(err).startswith(f"{path}, line 3, field '{expected[1]}': ")
        assert snapshot(store.path) == before
        return err
    store.append(read_releases(path), today=TODAY, allow_early=True, **kw)
    return store.read_log()


@pytest.mark.parametrize("period,release,value,expected", CASES)
def test_adversarial_cell(store, tmp_path, period, release, value, expected):
    """Each adversarial cell is refused at line 3 and its field, or stored as exactly the value it spells."""
    log = _check(store, _file(tmp_path, "gdp", period, release, value), expected)
    if expected[0] == "accept":
        new = log[(log["batch"] == 2) & (log["period"] != "2020Q2")]
        assert len(new) == 1
        row = new.iloc[0]
        assert (row["variable"], row["period"], str(row["release"].date()), row["value"]) == \
            ("gdp", expected[1], expected[2], expected[3])


@pytest.mark.parametrize("variable,expected", VARIABLE_CASES)
def test_adversarial_variable_name(store, tmp_path, variable, expected):
    """Variable names with control characters, Unicode blanks or full-width letters are refused; tab padding is not."""
    log = _check(store, _file(tmp_path, variable, "2024Q3", "2024-11-15", "1.5"), expected)
    if expected[0] == "accept":
        assert log.loc[log["period"] == "2024Q3", "variable"].tolist() == [expected[1]]


def test_the_reported_misread_is_refused_with_the_reason(store, tmp_path):
    """The row from the review (full-width 2024Q3) is refused saying only ASCII digits are accepted."""
    err = _check(store, _file(tmp_path, "gdp", "2024Q3".translate(FW), "2024-11-15", "1.5"), ("refuse", "period"))
    assert "only ASCII digits 0-9 are accepted" in str(err)
    err = _check(store, _file(tmp_path, "gdp", "0999Q1", "2024-11-15", "1.5"), ("refuse", "period"))
    assert "year 0999 is outside the supported years 1800-2200" in str(err)


def test_future_release_needs_allow_future(store, tmp_path):
    """A release more than a year after the ingest day is refused naming --allow-future; with it, it is stored."""
    path = _file(tmp_path, "gdp", "2024Q3", "2030-01-15", "1.5")
    err = _check(store, path, ("refuse", "release"))
    assert "more than a year after the ingest day (2024-12-01)" in str(err) and "--allow-future" in str(err)
    log = _check(store, path, ("accept",), allow_future=True)
    assert log.loc[log["period"] == "2024Q3", "release"].dt.strftime("%Y-%m-%d").tolist() == ["2030-01-15"]


def test_nul_in_a_parquet_text_cell_is_refused(store, tmp_path):
    """A NUL in a Parquet text column is refused like in CSV (row number as line)."""
    df = pd.DataFrame({"variable": ["gdp", "gdp"], "period": ["2020Q2", "2020Q3"],
                       "release": ["2020-07-30", "2020-10-30"], "value": ["99.0", "1.5\x00"]})
    p = tmp_path / "nul.parquet"
    df.to_parquet(p)
    before = snapshot(store.path)
    with pytest.raises(InputError, match=r"line 2, field 'value': value cell '1\.5\\x00' holds a control character"):
        store.append(read_releases(p), today=TODAY)
    assert snapshot(store.path) == before


def test_nul_cell_in_a_triangle_is_not_taken_for_blank(store, tmp_path):
    """A triangle cell holding only NUL is refused, not read as 'not published'."""
    p = tmp_path / "tri.csv"
    p.write_bytes(b"period,2020-04-30,2020-07-30\n2020Q1,100.0,\x00\n")
    with pytest.raises(InputError, match="field '2020-07-30': value cell '\\\\x00' holds a control character"):
        store.append(read_releases(p, layout="triangle", variable="gdp"), today=TODAY)


def test_huge_cell_is_never_echoed_whole(store, tmp_path):
    """A 4 MB cell is cut in the message (ellipsis and length), which stays one short line."""
    big = "9" * 2_000_000 + "x" + "9" * 2_000_000
    p = tmp_path / "big.csv"
    p.write_text(f"variable,period,release,value\ngdp,2024Q3,2024-11-15,{big}\n")
    with pytest.raises(InputError) as info:
        store.append(read_releases(p), today=TODAY)
    msg = str(info.value)
    assert len(msg) < 300 and "\u2026" in msg and "(4000001 characters)" in msg
    assert msg.startswith(f"{p}, line 2, field 'value': value '9999")


def test_huge_period_cell_is_cut_too(store, tmp_path):
    """A 4 MB period label is cut in the message as well."""
    p = tmp_path / "bigp.csv"
    p.write_text(f"variable,period,release,value\ngdp,{'Q' * 4_000_000},2024-11-15,1\n")
    with pytest.raises(InputError) as info:
        store.append(read_releases(p), today=TODAY)
    assert len(str(info.value)) < 300 and "field 'period'" in str(info.value)


@pytest.mark.parametrize("text,line,field", [
    ('variable,period,release,value\ngdp,2020Q2,2020-07-30,1.0\ngdp,2020Q3,"2020-10-30,2.0\ngdp,2020Q4,2021-01-30,3\n',
     3, "release"),
    ('variable,period,release,value\ngdp,2020Q2,2020-07-30,1.0\n\n\ngdp,2020Q3,2020-10-30,"2.0\n', 5, "value"),
    ('variable,period,release,value,note\ngdp,2020Q2,2020-07-30,1.0,"two\nlines"\ngdp,2020Q3,2020-10-30,2.0,"open\n',
     4, "note"),
])
def test_unterminated_quote_is_reported_on_its_row(store, tmp_path, text, line, field):
    """An opening quote never closed (RFC 4180 section 2) is reported at the physical line and field where it opens."""
    p = tmp_path / "quote.csv"
    p.write_text(text)
    before = snapshot(store.path)
    with pytest.raises(InputError) as info:
        store.append(read_releases(p), today=TODAY)
    assert (info.value.line, info.value.field) == (line, field), str(info.value)
    assert "unterminated quoted field" in str(info.value)
    assert snapshot(store.path) == before


def test_utf16_file_is_named_and_explained(store, tmp_path):
    """A UTF-16 file (byte-order mark) is refused naming the file and saying to save it as UTF-8."""
    p = tmp_path / "utf16.csv"
    p.write_bytes("variable,period,release,value\ngdp,2024Q3,2024-11-15,1.5\n".encode("utf-16"))
    with pytest.raises(InputError, match=rf"^{p}, line 1: cannot read file: UTF-16 text .*save it as UTF-8"):
        read_releases(p)


def test_undecodable_file_name_is_printable(store, tmp_path):
    """A file name that is not UTF-8 (surrogate-escaped bytes) is shown with \\xNN escapes in one line."""
    name = bytes(tmp_path) + b"/caf\xe9.csv"
    with open(name, "wb") as fh:
        fh.write(b"variable,period,release,value\ngdp,2024Q3,2024-11-15,\xff\n")
    import os

    path = Path(os.fsdecode(name))
    with pytest.raises(InputError) as info:
        read_releases(path)
    msg = str(info.value)
    msg.encode("utf-8")  # printable: no lone surrogates
    assert "caf\\xe9.csv, line 2: cannot read file: not UTF-8 text" in msg
