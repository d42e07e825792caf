"""Information sets, transforms inside a vintage, monthly→quarterly conversion, targets and truths.

Every store here is hand-made (invented numbers); expected values are worked out by hand from
the published definitions and written next to each check.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from vintages import (
    TRANSFORMS,
    InfoSet,
    SeriesSpec,
    build_infoset,
    build_infosets,
    make_targets,
    parse_truth,
    truth_table,
    truth_values,
)
from vintages.cube import Cube
from vintages.errors import LookAheadError
from vintages.transforms import (
    apply_transform,
    months_to_quarters,
    register_transform,
    transform_names,
)

D = np.datetime64


def _cube(rows, meta) -> Cube:
    df = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    df["release"] = pd.to_datetime(df["release"])
    return Cube.from_log(df, meta)


# A small release triangle of quarterly gdp levels (invented):
#   release      2009Q3  2009Q4  2010Q1  2010Q2  2010Q3
#   2010-04-30   100.0   101.0   102.0
#   2010-05-30           101.2   102.4
#   2010-07-30                   102.6   103.0
#   2010-10-30                           103.5   104.0
GDP_ROWS = [
    ("gdp", "2009Q3", "2010-04-30", 100.0),
    ("gdp", "2009Q4", "2010-04-30", 101.0),
    ("gdp", "2010Q1", "2010-04-30", 102.0),
    ("gdp", "2009Q4", "2010-05-30", 101.2),
    ("gdp", "2010Q1", "2010-05-30", 102.4),
    ("gdp", "2010Q1", "2010-07-30", 102.6),
    ("gdp", "2010Q2", "2010-07-30", 103.0),
    ("gdp", "2010Q2", "2010-10-30", 103.5),
    ("gdp", "2010Q3", "2010-10-30", 104.0),
]
# Monthly industrial production (invented): each release adds a month; 2010-01 is revised once.
IP_ROWS = [
    ("ip", "2010-01", "2010-02-15", 10.0),
    ("ip", "2010-01", "2010-03-15", 11.0),
    ("ip", "2010-02", "2010-03-15", 12.0),
    ("ip", "2010-03", "2010-04-15", 13.0),
    ("ip", "2010-04", "2010-05-15", 14.0),
    ("ip", "2010-05", "2010-06-15", 16.0),
    ("ip", "2010-06", "2010-07-15", 18.0),
]
META = {"gdp": {"freq": "Q"}, "ip": {"freq": "M"}}


@pytest.fixture
def cube() -> Cube:
    return _cube(GDP_ROWS + IP_ROWS, META)


# ---------------------------------------------------------------- transforms inside one vintage
def test_realtime_growth_differs_from_latest_growth(cube):
    """The real-time growth rate is computed from the levels of the vintage in force at the origin."""
    info = build_infoset(cube, "2010-05-01", {"gdp": "dlog_ann"})
    latest = build_infoset(cube, "2010-10-30", {"gdp": "dlog_ann"})
    # annualised log growth = 400 * ln(x_t / x_{t-1}) (common practice for quarterly data)
    # real time (vintage 2010-04-30): 400 ln(102.0/101.0) = 3.94092
    # latest   (vintage 2010-10-30): 400 ln(102.6/101.2) = 5.49567
    rt = float(info.panel.sel(period="2010Q1", variable="gdp"))
    lt = float(latest.panel.sel(period="2010Q1", variable="gdp"))
    assert rt == pytest.approx(400 * math.log(102.0 / 101.0), rel=1e-12)
    assert rt == pytest.approx(3.94092, abs=5e-6)
    assert lt == pytest.approx(5.49567, abs=5e-6)
    # and never a mix of a revised level with an unrevised one: 400 ln(102.0/101.2)
    assert rt != pytest.approx(400 * math.log(102.0 / 101.2))
    assert info.last_observed["gdp"] == pd.Period("2010Q1", "Q")
    assert info.source_release["gdp"] == D("2010-04-30")
    assert info.current == pd.Period("2010Q2", "Q")


def test_builtin_transforms_match_their_formulas():
    """diff, dlog, dlog_ann and yoy follow their textbook definitions row by row (common practice)."""
    rng = np.random.default_rng(7)
    x = 100 * np.exp(np.cumsum(rng.normal(0.01, 0.02, size=(3, 30)), axis=1))
    x[1, 25:] = np.nan
    s = pd.DataFrame(x.T)  # pandas as the independent reference, column = vintage
    np.testing.assert_allclose(
        apply_transform("diff", x, "Q"), s.diff().to_numpy().T, equal_nan=True
    )
    np.testing.assert_allclose(
        apply_transform("dlog", x, "Q"), 100 * np.log(s).diff().to_numpy().T, equal_nan=True
    )
    np.testing.assert_allclose(
        apply_transform("dlog_ann", x, "Q"), 400 * np.log(s).diff().to_numpy().T, equal_nan=True
    )
    np.testing.assert_allclose(
        apply_transform("dlog_ann", x, "M"), 1200 * np.log(s).diff().to_numpy().T, equal_nan=True
    )
    np.testing.assert_allclose(
        apply_transform("yoy", x, "Q"),
        100 * s.pct_change(4, fill_method=None).to_numpy().T,
        equal_nan=True,
    )
    np.testing.assert_allclose(
        apply_transform("yoy", x, "M"),
        100 * s.pct_change(12, fill_method=None).to_numpy().T,
        equal_nan=True,
    )


def test_log_transform_refuses_nonpositive_levels(cube):
    """A log growth rate of a series with a zero or negative level is an error naming the variable."""
    bad = _cube(
        [("rate", "2010Q1", "2010-04-30", 1.0), ("rate", "2010Q2", "2010-07-30", -0.5)],
        {"rate": {"freq": "Q"}},
    )
    with pytest.raises(ValueError, match=r"'rate'.*strictly positive"):
        build_infoset(bad, "2010-07-30", {"rate": "dlog"})


def test_register_transform_accepts_rowwise_and_refuses_cross_row():
    """The one hook takes a row-wise function and refuses one that mixes vintages."""

    def dlog2(values, freq):
        out = np.full(values.shape, np.nan)
        out[:, 2:] = 100 * np.log(values[:, 2:] / values[:, :-2])
        return out

    def demeaned_across_rows(values, freq):
        return values - values[:1]

    register_transform("test_dlog2", dlog2, overwrite=True)
    assert "test_dlog2" in transform_names() and "test_dlog2" in TRANSFORMS
    with pytest.raises(ValueError, match="different rows"):
        register_transform("test_cross", demeaned_across_rows)
    with pytest.raises(ValueError, match="built in"):
        register_transform("dlog", dlog2)
    cube = _cube(GDP_ROWS, {"gdp": {"freq": "Q"}})
    info = build_infoset(cube, "2010-07-30", {"gdp": "test_dlog2"})
    # vintage 2010-07-30: 2009Q4 = 101.2 (from 2010-05-30), 2010Q2 = 103.0: 100 ln(103.0/101.2)
    assert float(info.panel.sel(period="2010Q2", variable="gdp")) == pytest.approx(
        100 * math.log(103.0 / 101.2)
    )


def test_unknown_transform_lists_valid_names(cube):
    """An unknown transformation is refused with the sorted list of valid names."""
    with pytest.raises(
        ValueError, match=r"unknown transform 'dlgo'; expected one of \['diff', 'dlog'"
    ):
        build_infoset(cube, "2010-07-30", {"gdp": "dlgo"})


# ---------------------------------------------------------------- monthly → quarterly
@pytest.mark.parametrize(
    "origin, q1, q2, q2_partial",
    [
        # at 2010-06-20 the vintage holds Jan 11 (revised), Feb 12, Mar 13, Apr 14, May 16
        ("2010-06-20", (12.0, 36.0, 13.0), (15.0, np.nan, np.nan), True),
        # at 2010-07-20 June (18) is in: Q2 complete
        ("2010-07-20", (12.0, 36.0, 13.0), (16.0, 48.0, 18.0), False),
    ],
)
def test_month_to_quarter_conversion_and_partial_flags(cube, origin, q1, q2, q2_partial):
    """mean/sum/last of the quarter's months as known at the origin; a partial quarter is flagged."""
    for method, k in (("mean", 0), ("sum", 1), ("last", 2)):
        info = build_infoset(cube, origin, {"ip": {"convert": method}})
        p = info.panel.to_series()
        assert p[("2010Q1", "ip")] == pytest.approx(q1[k])
        if np.isnan(q2[k]):  # sum/last of a partial quarter is missing: the panel ends at 2010Q1
            assert info.last_observed["ip"] == pd.Period("2010Q1", "Q")
            assert str(info.periods[-1]) == "2010Q1"
        else:
            assert p[("2010Q2", "ip")] == pytest.approx(q2[k])
    info = build_infoset(cube, origin, {"ip": {"convert": "mean"}})
    assert bool(info.partial.sel(period="2010Q2", variable="ip")) is q2_partial
    assert not bool(info.partial.sel(period="2010Q1", variable="ip"))
    assert info.conversions == {"ip": "mean"}
    # provenance: the release of the quarter's latest month
    last_month_release = {"2010-06-20": D("2010-06-15"), "2010-07-20": D("2010-07-15")}[origin]
    assert info.source_release["ip"] == last_month_release
    assert info.native_last["ip"] == pd.Period(
        {"2010-06-20": "2010-05", "2010-07-20": "2010-06"}[origin], "M"
    )


def test_partial_quarter_mean_uses_months_available_or_drops(cube):
    """By default a partial quarter is the mean of the months known; partial='drop' leaves it out."""
    info = build_infoset(cube, "2010-03-20", {"ip": "level"})
    # at 2010-03-20: Jan 11 (revised on 2010-03-15), Feb 12 -> mean 11.5, flagged
    assert float(info.panel.sel(period="2010Q1", variable="ip")) == pytest.approx(11.5)
    assert bool(info.partial.sel(period="2010Q1", variable="ip"))
    with pytest.raises(LookAheadError, match="no value"):
        build_infoset(cube, "2010-03-20", {"ip": "level"}, partial="drop")
    info = build_infoset(cube, "2010-06-20", {"ip": {"partial": "drop"}})
    assert info.last_observed["ip"] == pd.Period("2010Q1", "Q")


def test_mean_conversion_matches_pandas_groupby():
    """Quarterly means of a long monthly vintage equal pandas' groupby over quarters (reference library)."""
    rng = np.random.default_rng(3)
    months = pd.period_range("2001-02", "2004-11", freq="M")
    x = 50 + rng.normal(size=len(months)).cumsum()
    q, first_q, count, _ = months_to_quarters(x[None, :], months[0].ordinal, "mean")
    ref = pd.Series(x, index=months).groupby(months.asfreq("Q")).mean()
    assert first_q == ref.index[0].ordinal
    np.testing.assert_allclose(q[0], ref.to_numpy())
    np.testing.assert_array_equal(
        count[0], pd.Series(1, index=months).groupby(months.asfreq("Q")).sum()
    )


def test_mean3_growth_equals_mariano_murasawa_weights():
    """dlog of the mean3 conversion equals (1/3)(g_t + 2g_{t-1} + 3g_{t-2} + 2g_{t-3} + g_{t-4}).

    Mariano and Murasawa (2003, J. Applied Econometrics 18(4), eq. for the quarterly growth of a
    three-month average in terms of monthly growth rates).
    """
    rng = np.random.default_rng(11)
    months = pd.period_range("2000-01", "2003-12", freq="M")
    x = 100 * np.exp(np.cumsum(rng.normal(0.003, 0.01, size=len(months))))
    q, first_q, _, _ = months_to_quarters(x[None, :], months[0].ordinal, "mean3")
    got = apply_transform("dlog", q, "Q")[0]
    g = 100 * np.diff(np.log(x))  # monthly log growth, g[i] is the growth into month i+1
    w = np.array([1, 2, 3, 2, 1]) / 3.0
    for k in range(1, q.shape[1]):
        t = 3 * k + 2  # index of the quarter's third month in x
        mm = float(w @ g[t - 1 - np.arange(5)])
        assert got[k] == pytest.approx(mm, rel=1e-10, abs=1e-12)
    # and close to the growth of the arithmetic three-month average (second-order difference)
    qa, _, _, _ = months_to_quarters(x[None, :], months[0].ordinal, "mean")
    arith = apply_transform("dlog", qa, "Q")[0]
    assert np.nanmax(np.abs(arith - got)) < 0.01


def test_mean3_only_for_log_growth(cube):
    """mean3 with a non-growth transform is refused, listing the transforms it serves."""
    with pytest.raises(ValueError, match=r"'mean3'.*\['dlog', 'dlog_ann'\]"):
        build_infoset(cube, "2010-07-30", {"ip": {"transform": "level", "convert": "mean3"}})
    with pytest.raises(ValueError, match="unknown conversion 'avg'"):
        build_infoset(cube, "2010-07-30", {"ip": {"convert": "avg"}})
    with pytest.raises(ValueError, match="'convert' applies to monthly variables"):
        build_infoset(cube, "2010-07-30", {"gdp": {"convert": "mean"}})
    with pytest.raises(ValueError, match="quarterly and cannot enter a monthly panel"):
        build_infoset(cube, "2010-07-30", {"gdp": "level"}, freq="M")


# ---------------------------------------------------------------- ragged edge policies
# A hand-made ragged panel at origin 2010-04-30: a ends 2010Q1, b 2009Q4, c 2009Q3.
RAGGED = [
    ("a", "2009Q2", "2010-04-30", 1.0),
    ("a", "2009Q3", "2010-04-30", 2.0),
    ("a", "2009Q4", "2010-04-30", 3.0),
    ("a", "2010Q1", "2010-04-30", 4.0),
    ("b", "2009Q2", "2010-03-01", 10.0),
    ("b", "2009Q3", "2010-03-01", 20.0),
    ("b", "2009Q4", "2010-03-01", 30.0),
    ("c", "2009Q2", "2010-02-01", 100.0),
    ("c", "2009Q3", "2010-02-01", 200.0),
]
RMETA = {k: {"freq": "Q"} for k in "abc"}


def test_policy_keep_leaves_nan_tail():
    """keep: the panel runs to the latest period of any variable; the others end in NaN."""
    info = build_infoset(_cube(RAGGED, RMETA), "2010-04-30", ["a", "b", "c"], policy="keep")
    assert [str(p) for p in info.periods] == ["2009Q2", "2009Q3", "2009Q4", "2010Q1"]
    np.testing.assert_array_equal(
        info.values(), [[1, 10, 100], [2, 20, 200], [3, 30, np.nan], [4, np.nan, np.nan]]
    )
    assert {k: str(v) for k, v in info.last_observed.items()} == {
        "a": "2010Q1",
        "b": "2009Q4",
        "c": "2009Q3",
    }
    assert info.shifts == {"a": 0, "b": 0, "c": 0}


def test_policy_balance_cuts_at_common_end():
    """balance: every variable ends at the earliest last-observed period."""
    info = build_infoset(_cube(RAGGED, RMETA), "2010-04-30", ["a", "b", "c"], policy="balance")
    assert [str(p) for p in info.periods] == ["2009Q2", "2009Q3"]
    np.testing.assert_array_equal(info.values(), [[1, 10, 100], [2, 20, 200]])
    assert set(map(str, info.last_observed.values())) == {"2009Q3"}
    assert info.source_release == {"a": D("2010-04-30"), "b": D("2010-03-01"), "c": D("2010-02-01")}


def test_policy_realign_shifts_each_series_to_the_edge():
    """realign: each series is shifted forward so its last value sits on the panel's last row."""
    info = build_infoset(_cube(RAGGED, RMETA), "2010-04-30", ["a", "b", "c"], policy="realign")
    assert [str(p) for p in info.periods] == ["2009Q2", "2009Q3", "2009Q4", "2010Q1"]
    assert info.shifts == {"a": 0, "b": 1, "c": 2}
    # row p of variable v holds its value for p - shift[v]
    np.testing.assert_array_equal(
        info.values(), [[1, np.nan, np.nan], [2, 10, np.nan], [3, 20, 100], [4, 30, 200]]
    )
    assert set(map(str, info.last_observed.values())) == {"2010Q1"}
    assert {k: str(v) for k, v in info.native_last.items()} == {
        "a": "2010Q1",
        "b": "2009Q4",
        "c": "2009Q3",
    }


def test_first_period_cuts_after_transforming(cube):
    """The first growth rate of a cut panel uses the level before the cut, from the same vintage."""
    info = build_infoset(cube, "2010-07-30", {"gdp": "dlog"}, first_period="2010Q1")
    assert str(info.periods[0]) == "2010Q1"
    # vintage 2010-07-30: 2009Q4 = 101.2, 2010Q1 = 102.6
    assert float(info.panel.sel(period="2010Q1", variable="gdp")) == pytest.approx(
        100 * math.log(102.6 / 101.2)
    )


def test_variable_without_value_at_origin_is_refused(cube):
    """A variable that has no value yet at an origin raises LookAheadError naming it."""
    with pytest.raises(LookAheadError, match=r"'gdp'.*first release is 2010-04-30"):
        build_infosets(cube, ["2010-03-01", "2010-07-30"], {"gdp": "level", "ip": "level"})


def test_origins_are_checked_sorted_and_unique(cube):
    """Origins come back sorted and unique; one after the last release is refused."""
    infos = build_infosets(cube, ["2010-07-30", "2010-05-01", "2010-05-01"], {"gdp": "level"})
    assert [i.origin for i in infos] == [D("2010-05-01"), D("2010-07-30")]
    with pytest.raises(LookAheadError, match="after the store's last release 2010-10-30"):
        build_infosets(cube, ["2010-11-01"], {"gdp": "level"})


def test_pseudo_mode_uses_latest_values_at_realtime_edge(cube):
    """pseudo: the latest vintage's values, cut where the real-time vintage ended."""
    rt = build_infoset(cube, "2010-05-01", {"gdp": "level", "ip": "level"})
    ps = build_infoset(cube, "2010-05-01", {"gdp": "level", "ip": "level"}, mode="pseudo")
    assert ps.mode == "pseudo" and ps.last_observed == rt.last_observed
    # gdp edge 2010Q1 in real time; latest values 2009Q4 = 101.2, 2010Q1 = 102.6
    assert float(ps.panel.sel(period="2010Q1", variable="gdp")) == pytest.approx(102.6)
    assert float(rt.panel.sel(period="2010Q1", variable="gdp")) == pytest.approx(102.0)
    # the latest vintage has 2010Q2, but the real-time edge was 2010Q1
    assert str(ps.periods[-1]) == "2010Q1" and list(ps.periods) == list(rt.periods)
    # ip: real-time vintage had Jan-Mar at 2010-05-01 (Mar released 04-15): quarter mean 12
    assert float(ps.panel.sel(period="2010Q1", variable="ip")) == pytest.approx(12.0)
    assert ps.source_release["gdp"] == D("2010-07-30")  # revised value: released after the origin


def test_unknown_options_list_valid_values(cube):
    """Unknown policy, mode or spec keys are refused with the sorted valid values."""
    with pytest.raises(
        ValueError,
        match=r"unknown ragged-edge policy 'cut'; expected one of \['balance', 'keep', 'realign'\]",
    ):
        build_infoset(cube, "2010-07-30", ["gdp"], policy="cut")
    with pytest.raises(
        ValueError,
        match=r"unknown mode 'pseudo-real-time'; expected one of \['pseudo', 'real-time'\]",
    ):
        build_infoset(cube, "2010-07-30", ["gdp"], mode="pseudo-real-time")
    with pytest.raises(
        ValueError, match=r"unknown key\(s\) \['transfrom'\].*\['convert', 'partial', 'transform'\]"
    ):
        build_infoset(cube, "2010-07-30", {"gdp": {"transfrom": "dlog"}})
    with pytest.raises(
        ValueError, match=r"unknown variable 'gpd'; expected one of \['gdp', 'ip'\]"
    ):
        build_infoset(cube, "2010-07-30", ["gpd"])


def test_seriesspec_and_mapping_give_same_infoset(cube):
    """A SeriesSpec and the equivalent mapping give identical information sets."""
    a = build_infoset(
        cube, "2010-07-30", {"gdp": SeriesSpec("dlog_ann"), "ip": SeriesSpec("dlog", "mean3")}
    )
    b = build_infoset(
        cube,
        "2010-07-30",
        {"gdp": {"transform": "dlog_ann"}, "ip": {"transform": "dlog", "convert": "mean3"}},
    )
    assert isinstance(a, InfoSet) and a.data_hash() == b.data_hash()
    assert a.variables == ["gdp", "ip"]


# ---------------------------------------------------------------- targets
def test_make_targets_from_infoset_and_date(cube):
    """Horizon h targets the origin's current period plus h (the period containing the origin)."""
    info = build_infoset(cube, "2010-05-01", ["gdp"])
    tg = make_targets(info, ["gdp"], range(-1, 3))
    assert tg.current == pd.Period("2010Q2", "Q")
    assert [str(p) for p in tg.periods()] == ["2010Q1", "2010Q2", "2010Q3", "2010Q4"]
    assert list(tg.steps_after(info.last_observed["gdp"])) == [0, 1, 2, 3]
    tm = make_targets("2010-05-01", "ip", {"min": 0, "max": 1}, freq="M")
    assert tm.current == pd.Period("2010-05", "M") and tm.horizons == (0, 1)
    with pytest.raises(ValueError, match="integers"):
        make_targets(info, ["gdp"], [0.5])


# ---------------------------------------------------------------- truths
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


def test_vectorised_build_matches_simple_pandas_reference():
    """The all-origins build equals a per-origin pandas computation on Cube.asof (an obviously-correct reference)."""
    rng = np.random.default_rng(42)
    rows = []
    months = pd.period_range("2005-01", "2008-12", freq="M")
    quarters = pd.period_range("2005Q1", "2008Q4", freq="Q")
    for k, q in enumerate(quarters):  # gdp: each quarter released twice, 30 and 75 days after
        for lag in (30, 75):
            rel = q.end_time.normalize() + pd.Timedelta(days=lag)
            for p in quarters[max(0, k - 3) : k + 1]:
                rows.append(("gdp", str(p), rel, 100 + p.ordinal + rng.normal(0, 0.2)))
    for k, m in enumerate(months):  # ip: one release a month, republishing the last 6 months
        rel = m.end_time.normalize() + pd.Timedelta(days=20)
        for p in months[max(0, k - 5) : k + 1]:
            rows.append(("ip", str(p), rel, 50 + 0.1 * p.ordinal + rng.normal(0, 0.3)))
    cube = _cube(rows, META)
    origins = pd.date_range("2006-01-10", "2008-12-31", freq="37D")
    specs = {"gdp": "dlog_ann", "ip": {"transform": "dlog", "convert": "mean"}}
    infos = build_infosets(cube, origins, specs)
    for o, info in zip(origins, infos, strict=True):
        v = cube.asof(o)
        gdp = 400 * np.log(v["gdp"]).diff()
        ip = v["ip"]
        ipq = 100 * np.log(ip.groupby(ip.index.asfreq("Q")).mean()).diff()
        ref = pd.DataFrame({"gdp": gdp, "ip": ipq}).dropna(how="all")
        got = info.panel.to_pandas()
        np.testing.assert_allclose(
            got.to_numpy(), ref.reindex(got.index).to_numpy(), rtol=1e-9, atol=1e-12
        )
        assert list(got.index) == list(ref.index)
