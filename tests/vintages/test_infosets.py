"""Information sets: transforms inside a vintage, conversion, ragged edges, modes and layouts.

Every store here is hand-made (invented numbers); expected values are worked out by hand from
the published definitions and written next to each check.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from vintages import build_infoset, build_infosets
from vintages.errors import LookAheadError

D = np.datetime64
META = {"gdp": {"freq": "Q"}, "ip": {"freq": "M"}}


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


def test_log_transform_refuses_nonpositive_levels(cube, make_cube):
    """A log growth rate of a series with a zero or negative level is an error naming the variable."""
    bad = make_cube(
        [("rate", "2010Q1", "2010-04-30", 1.0), ("rate", "2010Q2", "2010-07-30", -0.5)],
        {"rate": {"freq": "Q"}},
    )
    with pytest.raises(ValueError, match=r"'rate'.*strictly positive"):
        build_infoset(bad, "2010-07-30", {"rate": "dlog"})


def test_unknown_transform_lists_valid_names(cube):
    """An unknown transformation is refused with the sorted list of valid names."""
    with pytest.raises(
        ValueError, match=r"unknown transform 'dlgo'; expected one of \['diff', 'dlog'"
    ):
        build_infoset(cube, "2010-07-30", {"gdp": "dlgo"})


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


def test_policy_keep_leaves_nan_tail(make_cube):
    """keep: the panel runs to the latest period of any variable; the others end in NaN."""
    info = build_infoset(make_cube(RAGGED, RMETA), "2010-04-30", ["a", "b", "c"], policy="keep")
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


def test_policy_balance_cuts_at_common_end(make_cube):
    """balance: every variable ends at the earliest last-observed period."""
    info = build_infoset(make_cube(RAGGED, RMETA), "2010-04-30", ["a", "b", "c"], policy="balance")
    assert [str(p) for p in info.periods] == ["2009Q2", "2009Q3"]
    np.testing.assert_array_equal(info.values(), [[1, 10, 100], [2, 20, 200]])
    assert set(map(str, info.last_observed.values())) == {"2009Q3"}
    assert info.source_release == {"a": D("2010-04-30"), "b": D("2010-03-01"), "c": D("2010-02-01")}


def test_policy_realign_shifts_each_series_to_the_edge(make_cube):
    """realign: each series is shifted forward so its last value sits on the panel's last row."""
    info = build_infoset(make_cube(RAGGED, RMETA), "2010-04-30", ["a", "b", "c"], policy="realign")
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


def _rich_store(make_cube):
    """gdp released 30 and 75 days after each quarter (last 4 quarters each time), ip monthly
    20 days after each month republishing its last 6 months (invented, seeded)."""
    rng = np.random.default_rng(42)
    rows = []
    months = pd.period_range("2005-01", "2008-12", freq="M")
    quarters = pd.period_range("2005Q1", "2008Q4", freq="Q")
    for k, q in enumerate(quarters):
        for lag in (30, 75):
            rel = q.end_time.normalize() + pd.Timedelta(days=lag)
            for p in quarters[max(0, k - 3) : k + 1]:
                rows.append(("gdp", str(p), rel, 100 + p.ordinal + rng.normal(0, 0.2)))
    for k, m in enumerate(months):
        rel = m.end_time.normalize() + pd.Timedelta(days=20)
        for p in months[max(0, k - 5) : k + 1]:
            rows.append(("ip", str(p), rel, 50 + 0.1 * p.ordinal + rng.normal(0, 0.3)))
    return make_cube(rows, META), rows


def test_vectorised_build_matches_simple_pandas_reference(make_cube):
    """The all-origins build equals a per-origin pandas computation on Cube.asof (an obviously-correct reference)."""
    cube, _ = _rich_store(make_cube)
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


# ---------------------------------------------------------------- the native layout
def test_native_layout_keeps_each_frequency_on_one_monthly_axis(cube):
    """Native layout: monthly growth monthly, quarterly growth on the quarter's last month, as published."""
    info = build_infoset(cube, "2010-07-20", {"gdp": "dlog_ann", "ip": "dlog"}, freq="M",
                         layout="native")
    # vintage of 2010-07-20: gdp 2009Q3 100.0, 2009Q4 101.2, 2010Q1 102.4 (2010Q2 comes 07-30);
    # ip Jan 11 (revised), Feb 12, Mar 13, Apr 14, May 16, Jun 18 (released 07-15).
    # annualised quarterly growth 400 ln(x_t / x_{t-1}), monthly growth 100 ln(x_t / x_{t-1})
    # (common practice), each in its own frequency.
    months = [str(p) for p in info.periods]
    assert months == ["2009-12", "2010-01", "2010-02", "2010-03", "2010-04", "2010-05", "2010-06"]
    gdp = info.panel.sel(variable="gdp").to_numpy()
    want_gdp = [400 * math.log(101.2 / 100.0), np.nan, np.nan, 400 * math.log(102.4 / 101.2),
                np.nan, np.nan, np.nan]
    np.testing.assert_allclose(gdp, want_gdp, rtol=1e-12)
    ip = info.panel.sel(variable="ip").to_numpy()
    want_ip = [np.nan, np.nan] + [100 * math.log(b / a) for a, b in
                                  ((11, 12), (12, 13), (13, 14), (14, 16), (16, 18))]
    np.testing.assert_allclose(ip, want_ip, rtol=1e-12)
    assert info.native_freq == {"gdp": "Q", "ip": "M"} and info.layout == "native"
    assert info.freq == "M" and info.current == pd.Period("2010-07", "M")
    assert info.last_observed == {"gdp": pd.Period("2010-03", "M"), "ip": pd.Period("2010-06", "M")}
    assert info.native_last == {"gdp": pd.Period("2010Q1", "Q"), "ip": pd.Period("2010-06", "M")}
    assert info.source_release == {"gdp": D("2010-05-30"), "ip": D("2010-07-15")}
    assert info.partial is None and info.conversions == {} and info.shifts == {"gdp": 0, "ip": 0}
    assert info.freq_of("gdp") == "Q" and info.on_axis(pd.Period("2010Q1", "Q")) == pd.Period(
        "2010-03", "M"
    )


def test_native_layout_balance_cuts_at_the_earliest_edge(cube):
    """Native layout with balance: every variable ends at the earliest last-observed month."""
    info = build_infoset(cube, "2010-07-20", ["gdp", "ip"], freq="M", layout="native",
                         policy="balance")
    assert str(info.periods[-1]) == "2010-03"  # gdp's 2010Q1 sits on March
    assert info.last_observed == {"gdp": pd.Period("2010-03", "M"), "ip": pd.Period("2010-03", "M")}
    assert float(info.panel.sel(period="2010-03", variable="ip")) == 13.0


def test_native_layout_refuses_options_that_make_no_sense(cube):
    """Native layout refuses realign, a conversion, and monthly variables on a quarterly axis."""
    with pytest.raises(ValueError, match=r"'realign' makes no sense in the native layout.*"
                                         r"\['balance', 'keep'\]"):
        build_infoset(cube, "2010-07-20", ["gdp", "ip"], freq="M", layout="native",
                      policy="realign")
    with pytest.raises(ValueError, match="'convert' applies to the common layout only"):
        build_infoset(cube, "2010-07-20", {"ip": {"convert": "sum"}}, freq="M", layout="native")
    with pytest.raises(ValueError, match="monthly and cannot keep its frequency on a quarterly axis"):
        build_infoset(cube, "2010-07-20", ["gdp", "ip"], freq="Q", layout="native")
    with pytest.raises(ValueError, match=r"unknown panel layout 'mixed'; expected one of "
                                         r"\['common', 'native'\]"):
        build_infoset(cube, "2010-07-20", ["gdp"], layout="mixed")
    with pytest.raises(ValueError, match="or layout='native'"):
        build_infoset(cube, "2010-07-20", ["gdp", "ip"], freq="M")


def test_native_layout_after_each_release_matches_pandas_reference(make_cube):
    """Origins the day after each ip release: native panels equal a per-origin pandas build on Cube.asof."""
    from vintages import make_targets, parse_schedule, truth_values

    cube, rows = _rich_store(make_cube)
    origins = parse_schedule(
        {"rule": "after_release", "variable": "ip", "days": 1, "start": "2006-01-01"}, cube
    )
    assert len(origins) >= 30
    specs = {"gdp": "dlog_ann", "ip": "dlog"}
    infos = build_infosets(cube, origins, specs, freq="M", layout="native")
    released = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    for o, info in zip(origins, infos, strict=True):
        v = cube.asof(o)
        gdp = 400 * np.log(v["gdp"]).diff()
        gdp.index = gdp.index.asfreq("M", how="end")
        ref = pd.DataFrame({"gdp": gdp, "ip": 100 * np.log(v["ip"]).diff()}).dropna(how="all")
        ref = ref.reindex(pd.period_range(ref.index[0], ref.index[-1], freq="M"))
        got = info.panel.to_pandas()
        assert list(got.index) == list(ref.index)
        np.testing.assert_allclose(got.to_numpy(), ref.to_numpy(), rtol=1e-12, atol=1e-12)
        # the ragged edge as published: ip ends at the month released the day before the origin
        just = released[(released["variable"] == "ip")
                        & (released["release"] == pd.Timestamp(o - np.timedelta64(1, "D")))]
        assert str(info.last_observed["ip"]) == max(just["period"])
        assert info.native_last["gdp"] == v["gdp"].index[-1]
        # targets stay quarterly: h = 0 is the origin's quarter, on the axis at its last month
        tg = make_targets(info, ["gdp"], [-1, 0, 1], "Q")
        assert tg.freq == "Q" and tg.current == pd.Period(pd.Timestamp(o), "Q")
        assert info.on_axis(tg.periods()[1]) == tg.current.asfreq("M", how="end")
    tv, _, _ = truth_values(cube, "first", "gdp", "dlog_ann", tg.periods())
    assert np.isfinite(tv[0])  # the backcast quarter has a first release by the store's end
