"""Truth rules on a hand-made release triangle: which vintage each rule reads, and why one is missing."""

from __future__ import annotations

import math

import numpy as np
import pytest

from vintages import parse_truth, truth_table, truth_values

D = np.datetime64


@pytest.mark.parametrize(
    "rule, level, release",
    [
        ("first", 102.0, "2010-04-30"),
        ("release:2", 102.4, "2010-05-30"),
        ("release:3", 102.6, "2010-07-30"),
        (
            "lag:60D",
            102.4,
            "2010-05-30",
        ),  # 2010Q1 ends 03-31; +60 days = 05-30, that day's release counts
        ("lag:59D", 102.0, "2010-04-30"),
        ("latest", 102.6, "2010-07-30"),
        ("asof:2010-06-01", 102.4, "2010-05-30"),
    ],
)
def test_truth_rules_on_triangle_levels(cube, rule, level, release):
    """Each truth rule picks the value of the hand-made triangle worked out by hand."""
    v, rel, why = truth_values(cube, rule, "gdp", "level", ["2010Q1"])
    assert v[0] == pytest.approx(level) and rel[0] == D(release) and why == [None]


@pytest.mark.parametrize(
    "rule, num, den",
    [
        ("first", 102.0, 101.0),  # vintage 2010-04-30
        ("release:2", 102.4, 101.2),  # vintage 2010-05-30
        ("release:3", 102.6, 101.2),  # vintage 2010-07-30: 2009Q4 still 101.2 from 2010-05-30
        ("latest", 102.6, 101.2),
    ],
)
def test_truth_transform_computed_inside_the_truths_vintage(cube, rule, num, den):
    """The truth of a growth rate is the growth computed inside the truth's own vintage."""
    v, _, _ = truth_values(cube, rule, "gdp", "dlog", ["2010Q1"])
    assert v[0] == pytest.approx(100 * math.log(num / den), rel=1e-12)


def test_missing_truths_are_nan_with_reason(cube):
    """A truth not yet published is NaN with a reason, never imputed."""
    v, rel, why = truth_values(cube, "release:4", "gdp", "level", ["2010Q1"])
    assert np.isnan(v[0]) and np.isnat(rel[0])
    assert why == ["only 3 releases of 2010Q1 so far (by 2010-10-30)"]
    v, _, why = truth_values(cube, "first", "gdp", "level", ["2010Q4"])
    assert np.isnan(v[0]) and why == ["not yet published by 2010-10-30"]
    v, _, why = truth_values(cube, "lag:365D", "gdp", "level", ["2010Q3"])
    assert np.isnan(v[0]) and why[0].startswith("no vintage old enough") and "2011-09-30" in why[0]
    v, _, why = truth_values(cube, "latest", "gdp", "level", ["2010Q4"])
    assert np.isnan(v[0]) and why == ["not yet published by 2010-10-30"]
    v, _, why = truth_values(cube, "asof:2011-01-01", "gdp", "level", ["2010Q1"])
    assert np.isnan(v[0]) and "after the store's last release" in why[0]


def test_truth_of_monthly_quarter_needs_all_three_months(cube):
    """A converted quarter's first release is the day its third month first appeared."""
    v, rel, why = truth_values(
        cube, "first", "ip", {"convert": "mean"}, ["2010Q1", "2010Q2", "2010Q3"]
    )
    # Q1 complete on 2010-04-15 (March); Jan 11, Feb 12, Mar 13 -> 12
    assert v[0] == pytest.approx(12.0) and rel[0] == D("2010-04-15")
    # Q2 complete on 2010-07-15 (June): Apr 14, May 16, Jun 18 -> 16
    assert v[1] == pytest.approx(16.0) and rel[1] == D("2010-07-15")
    assert np.isnan(v[2]) and why[2] == "not yet published by 2010-10-30"
    v, _, why = truth_values(cube, "asof:2010-06-20", "ip", {"convert": "mean"}, ["2010Q2"])
    assert np.isnan(v[0]) and why == ["only 2 of 3 months of 2010Q2 published by 2010-06-20"]


def test_parse_truth_lists_valid_forms():
    """A malformed truth rule is refused with the list of valid forms."""
    assert str(parse_truth("lag:365D")) == "lag:365D" and parse_truth("release:2").k == 2
    assert parse_truth("asof:2020-06-30").date == D("2020-06-30")
    for bad in ("final", "release:0", "lag:365", "asof:2020-13-01"):
        with pytest.raises(ValueError, match="first|≥ 1|calendar date"):
            parse_truth(bad)
    with pytest.raises(ValueError, match=r"asof:YYYY-MM-DD, first, lag:NNND, latest, release:K"):
        parse_truth("final")


def test_truth_table_is_tidy(cube):
    """truth_table stacks rules × variables × periods with value, release and reason."""
    tab = truth_table(
        cube,
        ["first", "latest"],
        {"gdp": "dlog", "ip": {"convert": "mean"}},
        periods=["2010Q1", "2010Q2"],
    )
    assert list(tab.columns) == ["rule", "variable", "period", "value", "release", "reason"]
    assert len(tab) == 2 * 2 * 2
    row = tab[
        (tab["rule"] == "first") & (tab["variable"] == "gdp") & (tab["period"] == "2010Q1")
    ].iloc[0]
    assert row["value"] == pytest.approx(100 * math.log(102.0 / 101.0)) and row["reason"] is None
    assert tab["value"].isna().sum() == tab["reason"].notna().sum()
