"""Origins schedules, their spec parser, the coverage check and the release calendar."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from vintages.calendar import (
    after_release,
    check_origins,
    explicit,
    monthly,
    parse_schedule,
    quarterly,
    release_calendar,
)
from vintages.cube import Cube
from vintages.errors import LookAheadError

D = np.datetime64


@pytest.fixture
def cube() -> Cube:
    rows = [
        ("gdp", "2009Q4", "2010-01-30", 1.0),
        ("gdp", "2010Q1", "2010-04-30", 2.0),
        ("gdp", "2010Q1", "2010-05-30", 2.1),
        ("gdp", "2010Q2", "2010-07-30", 3.0),
        ("ip", "2010-01", "2010-02-15", 5.0),
        ("ip", "2010-02", "2010-03-15", 6.0),
    ]
    df = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    df["release"] = pd.to_datetime(df["release"])
    return Cube.from_log(df, {"gdp": {"freq": "Q"}, "ip": {"freq": "M"}})


def test_quarterly_matches_pandas_quarter_starts():
    """Day 15 of each quarter's second month equals pandas' QS-FEB anchors plus 14 days (reference library)."""
    got = quarterly(day=15, month_of_quarter=2, start="2005-01-01", end="2026-11-30")
    ref = pd.date_range("2005-01-01", "2026-11-30", freq="QS-FEB") + pd.Timedelta(days=14)
    ref = ref[ref <= "2026-11-30"]
    np.testing.assert_array_equal(got, ref.to_numpy().astype("datetime64[D]"))
    assert got.dtype == np.dtype("datetime64[D]")


@pytest.mark.parametrize("moq, anchor", [(1, "QS-JAN"), (3, "QS-MAR")])
def test_quarterly_month_of_quarter(moq, anchor):
    """month_of_quarter picks the quarter's first or third month (pandas anchored quarter starts)."""
    got = quarterly(day=1, month_of_quarter=moq, start="2010-01-01", end="2011-12-31")
    ref = pd.date_range("2010-01-01", "2011-12-31", freq=anchor).to_numpy().astype("datetime64[D]")
    np.testing.assert_array_equal(got, ref)


def test_monthly_day_past_month_end_is_last_day():
    """Day 31 means each month's last day (pandas month ends as the reference)."""
    got = monthly(31, "2020-01-01", "2020-12-31")
    ref = pd.date_range("2020-01-01", "2020-12-31", freq="ME").to_numpy().astype("datetime64[D]")
    np.testing.assert_array_equal(got, ref)
    assert list(monthly(1, "2021-01-02", "2021-03-01")) == [D("2021-02-01"), D("2021-03-01")]


def test_explicit_sorts_and_deduplicates():
    """Explicit dates come back sorted and unique as datetime64[D]."""
    got = explicit(
        ["2020-05-15", "2019-11-15", pd.Timestamp("2020-05-15"), np.datetime64("2018-01-02")]
    )
    assert list(got) == [D("2018-01-02"), D("2019-11-15"), D("2020-05-15")]
    with pytest.raises(ValueError, match="expected a date"):
        explicit(["2020-02-30"])


def test_after_release_is_the_day_after_each_release(cube):
    """after_release gives release day + days; the day after the store's last release is left out."""
    assert list(after_release(cube, "gdp", days=1)) == [
        D("2010-01-31"),
        D("2010-05-01"),
        D("2010-05-31"),
    ]
    assert list(after_release(cube, "gdp", days=0, start="2010-05-01")) == [
        D("2010-05-30"),
        D("2010-07-30"),
    ]
    assert list(after_release(cube, "ip", days=3)) == [D("2010-02-18"), D("2010-03-18")]


def test_parse_schedule_each_rule(cube):
    """parse_schedule builds each rule from a spec-like mapping."""
    q = parse_schedule(
        {
            "rule": "quarterly",
            "day": 15,
            "month_of_quarter": 2,
            "start": "2005-01-01",
            "end": "2005-12-31",
        }
    )
    assert list(q) == [D("2005-02-15"), D("2005-05-15"), D("2005-08-15"), D("2005-11-15")]
    e = parse_schedule({"rule": "explicit", "dates": ["2010-03-01", "2010-02-01"]})
    assert list(e) == [D("2010-02-01"), D("2010-03-01")]
    a = parse_schedule({"rule": "after_release", "variable": "gdp", "days": 1}, cube=cube)
    np.testing.assert_array_equal(a, after_release(cube, "gdp", 1))
    assert parse_schedule({"rule": "after_release", "variable": "gdp"}, validate_only=True) is None


def test_parse_schedule_errors_name_key_and_allowed_values(cube):
    """Unknown rules or keys, and missing keys, are refused naming the key and the allowed ones."""
    with pytest.raises(
        ValueError,
        match=r"unknown 'rule' 'weekly'; expected one of "
        r"\['after_release', 'explicit', 'monthly', 'quarterly'\]",
    ):
        parse_schedule({"rule": "weekly"})
    with pytest.raises(
        ValueError,
        match=r"unknown key\(s\) \['dayy'\]; allowed keys: "
        r"\['day', 'end', 'month_of_quarter', 'rule', 'start'\]",
    ):
        parse_schedule(
            {"rule": "quarterly", "dayy": 15, "start": "2005-01-01", "end": "2006-01-01"}
        )
    with pytest.raises(ValueError, match=r"missing required key\(s\) \['day'\]"):
        parse_schedule({"rule": "monthly", "start": "2005-01-01", "end": "2006-01-01"})
    with pytest.raises(
        ValueError, match="'month_of_quarter': expected an integer from 1 to 3; got 4"
    ):
        parse_schedule(
            {
                "rule": "quarterly",
                "day": 1,
                "month_of_quarter": 4,
                "start": "2005-01-01",
                "end": "2006-01-01",
            }
        )
    with pytest.raises(ValueError, match="needs the cube"):
        parse_schedule({"rule": "after_release", "variable": "gdp"})
    with pytest.raises(
        ValueError, match=r"unknown variable 'gpd'; expected one of \['gdp', 'ip'\]"
    ):
        parse_schedule({"rule": "after_release", "variable": "gpd"}, cube=cube)


def test_check_origins_refuses_outside_coverage(cube):
    """Origins after the last release or before the first are refused with LookAheadError."""
    got = check_origins(cube, ["2010-07-30", "2010-02-15", "2010-07-30"])
    assert list(got) == [D("2010-02-15"), D("2010-07-30")]
    with pytest.raises(
        LookAheadError, match=r"after the store's last release 2010-07-30: 2010-07-31"
    ):
        check_origins(cube, ["2010-05-01", "2010-07-31"])
    with pytest.raises(
        LookAheadError, match=r"before the store's first release 2010-01-30: 2010-01-01"
    ):
        check_origins(cube, ["2010-01-01"])
    with pytest.raises(ValueError, match="at least one origin"):
        check_origins(cube, [])


def test_release_calendar_lists_each_release(cube):
    """release_calendar has one row per variable and release day, with the periods published."""
    cal = release_calendar(cube)
    gdp = cal[cal["variable"] == "gdp"]
    assert list(gdp["release"].dt.strftime("%Y-%m-%d")) == [
        "2010-01-30",
        "2010-04-30",
        "2010-05-30",
        "2010-07-30",
    ]
    assert list(gdp["last_period"]) == ["2009Q4", "2010Q1", "2010Q1", "2010Q2"]
    assert int(cal["n_values"].sum()) == 6
