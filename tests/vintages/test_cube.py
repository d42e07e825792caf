"""Cube views on a hand-made release log with answers read off by hand.

The vocabulary follows the real-time data literature: a *vintage* is the data as published on
one date and the *initial* (first) release is the first value published for a period
(Croushore and Stark, 2001, "A real-time data set for macroeconomists", Journal of Econometrics
105(1), 111-130); later releases are revisions up to the *latest available* value (Aruoba,
2008, "Data revisions are not well behaved", Journal of Money, Credit and Banking 40(2-3),
319-340). The rules checked on top of that are common practice and the project's glossary:
a value released on day d is known from d on; the k-th estimate is the value in the k-th
release that published the cell (an unchanged re-publication counts); the lag-L estimate is the
one in force L days after the period's last day.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from vintages import Cube

# Invented releases of the Veldmark statistics office (quarterly output, monthly prices).
LOG = pd.DataFrame(
    [
        ("out", "2020Q1", "2020-04-30", 1.0),
        ("out", "2020Q1", "2020-05-29", 1.2),
        ("out", "2020Q1", "2020-07-30", 1.2),  # re-published unchanged
        ("out", "2020Q1", "2021-04-30", 1.5),  # benchmark revision
        ("out", "2020Q2", "2020-07-30", 2.0),
        ("out", "2020Q2", "2020-08-28", 2.1),
        ("out", "2020Q2", "2021-04-30", 2.4),
        ("cpi", "2020-01", "2020-02-14", 0.5),
        ("cpi", "2020-01", "2020-03-13", 0.6),
        ("cpi", "2020-02", "2020-03-13", 0.7),
    ],
    columns=["variable", "period", "release", "value"],
).assign(release=lambda d: pd.to_datetime(d["release"]).astype("datetime64[s]"))
META = {"out": {"freq": "Q"}, "cpi": {"freq": "M"}}


@pytest.fixture(scope="module")
def cube() -> Cube:
    return Cube.from_log(LOG, META)


def _q(da) -> dict[str, float]:
    """The 'out' row of a quarterly view as {period label: value}."""
    s = da.sel(variable="out").to_series()
    return dict(zip(s.index.astype(str), s.to_numpy(), strict=True))


def _rel(da) -> dict[str, str]:
    r = da.sel(variable="out")["release_date"].to_numpy()
    p = da.sel(variable="out")["period"].to_index().astype(str)
    return {k: ("NaT" if np.isnat(v) else str(v.astype("datetime64[D]"))) for k, v in zip(p, r, strict=True)}


def _same(got: dict, want: dict) -> None:
    assert list(got) == list(want)
    np.testing.assert_array_equal(np.array(list(got.values()), dtype=float), np.array(list(want.values()), dtype=float))


@pytest.mark.parametrize("k,want,rel", [
    (1, {"2020Q1": 1.0, "2020Q2": 2.0}, {"2020Q1": "2020-04-30", "2020Q2": "2020-07-30"}),
    (2, {"2020Q1": 1.2, "2020Q2": 2.1}, {"2020Q1": "2020-05-29", "2020Q2": "2020-08-28"}),
    (3, {"2020Q1": 1.2, "2020Q2": 2.4}, {"2020Q1": "2020-07-30", "2020Q2": "2021-04-30"}),
    (4, {"2020Q1": 1.5, "2020Q2": np.nan}, {"2020Q1": "2021-04-30", "2020Q2": "NaT"}),
    (5, {"2020Q1": np.nan, "2020Q2": np.nan}, {"2020Q1": "NaT", "2020Q2": "NaT"}),
])
def test_kth_estimate(cube, k, want, rel):
    """estimate(k) is the value of the k-th release of each cell (NaN when there are fewer)."""
    da = cube.estimate(k, "Q")
    _same(_q(da), want)
    assert _rel(da) == rel


def test_first_and_latest(cube):
    """first() is estimate(1); latest() is the value of each cell's last release."""
    _same(_q(cube.first("Q")), {"2020Q1": 1.0, "2020Q2": 2.0})
    _same(_q(cube.latest("Q")), {"2020Q1": 1.5, "2020Q2": 2.4})
    assert _rel(cube.latest("Q")) == {"2020Q1": "2021-04-30", "2020Q2": "2021-04-30"}
    m = cube.latest("M").sel(variable="cpi").to_series()
    assert m.to_dict() == {pd.Period("2020-01", "M"): 0.6, pd.Period("2020-02", "M"): 0.7}


@pytest.mark.parametrize("lag,want", [
    (29, {"2020Q1": np.nan, "2020Q2": np.nan}),  # 2020-04-29 and 2020-07-29: nothing out yet
    (30, {"2020Q1": 1.0, "2020Q2": 2.0}),  # 2020-04-30 and 2020-07-30: released that very day
    (60, {"2020Q1": 1.2, "2020Q2": 2.1}),  # 2020-05-30 and 2020-08-29
    (365, {"2020Q1": 1.2, "2020Q2": 2.4}),  # 2021-03-31 (before the benchmark) and 2021-06-30
])
def test_lagged_estimate(cube, lag, want):
    """lagged(L) is the value in force L days after the period's last day (that day included)."""
    _same(_q(cube.lagged(lag, "Q")), want)


def test_asof_views(cube):
    """asof(d) holds, per cell, the latest release dated on or before d, with its release date."""
    v = cube.asof("2020-06-01")
    assert v["out"].to_dict() == {pd.Period("2020Q1", "Q"): 1.2}  # 2020Q2 not yet published
    assert v["cpi"].to_dict() == {pd.Period("2020-01", "M"): 0.6, pd.Period("2020-02", "M"): 0.7}
    frame = v.to_frame().sort_values(["variable", "period"]).reset_index(drop=True)
    assert frame["release"].astype("datetime64[s]").dt.strftime("%Y-%m-%d").tolist() == \
        ["2020-03-13", "2020-03-13", "2020-05-29"]
    assert cube.asof("2020-04-29")["out"].empty
    assert cube.asof("2020-04-30")["out"].to_dict() == {pd.Period("2020Q1", "Q"): 1.0}
    assert cube.asof("2019-12-31").to_frame().empty


def test_release_dates_and_raw_array(cube):
    """release_dates lists a variable's publication days; to_dataarray keeps NaN for 'not published'."""
    assert cube.release_dates("out").astype(str).tolist() == ["2020-04-30", "2020-05-29", "2020-07-30",
                                                              "2020-08-28", "2021-04-30"]
    da = cube.to_dataarray("Q")
    assert da.dims == ("variable", "period", "release")
    assert int(da.notnull().sum()) == (LOG["variable"] == "out").sum()


def test_dataarray_restricted_to_variables_and_releases(cube):
    """to_dataarray(variables=, releases=) materialises only the cells asked for (NaN on a day without)."""
    da = cube.to_dataarray("Q", variables=["out"], releases=["2020-05-29", "2020-06-01", "2021-04-30"])
    assert da.sizes == {"variable": 1, "period": 2, "release": 3}
    got = da.sel(variable="out").to_pandas()
    assert got.loc["2020Q1"].tolist()[0] == 1.2 and np.isnan(got.loc["2020Q1"].tolist()[1])
    assert got.loc["2020Q1"].tolist()[2] == 1.5 and got.loc["2020Q2"].tolist()[2] == 2.4
    m = cube.to_dataarray("M", variables="cpi")  # default: the variable's own release days
    assert m["release"].dt.strftime("%Y-%m-%d").values.tolist() == ["2020-02-14", "2020-03-13"]
    with pytest.raises(KeyError, match=r"unknown Q variable\(s\) \['cpi'\]"):
        cube.to_dataarray("Q", variables=["cpi"])


def test_stores_starting_before_1970():
    """Periods before 1970 (negative ordinals) and release days before 1970-01-01 are as-of'd by the rules."""
    log = pd.DataFrame(
        [
            ("out", "1959Q1", "1959-04-30", 10.0),
            ("out", "1959Q1", "1959-05-29", 10.5),
            ("out", "1959Q2", "1959-07-30", 11.0),
            ("out", "1959Q1", "1970-02-01", 12.0),  # a benchmark revision across the epoch
            ("out", "1959Q2", "1970-02-01", 13.0),
            ("cpi", "1969-12", "1970-01-14", 0.3),
            ("cpi", "1969-11", "1969-12-12", 0.2),
        ],
        columns=["variable", "period", "release", "value"],
    ).assign(release=lambda d: pd.to_datetime(d["release"]))
    c = Cube.from_log(log, META)
    assert c.indexes["Q"].periods.tolist() == [-44, -43]  # pandas ordinals of 1959Q1, 1959Q2
    assert c.asof("1959-05-28")["out"].to_dict() == {pd.Period("1959Q1", "Q"): 10.0}
    assert c.asof("1969-12-31")["out"].to_dict() == {pd.Period("1959Q1", "Q"): 10.5,
                                                     pd.Period("1959Q2", "Q"): 11.0}
    assert c.asof("1970-02-01")["out"].tolist() == [12.0, 13.0]
    assert c.asof("1969-12-31")["cpi"].to_dict() == {pd.Period("1969-11", "M"): 0.2}
    assert c.asof("1970-01-14")["cpi"].tolist() == [0.2, 0.3]
    assert _q(c.estimate(2, "Q")) == {"1959Q1": 10.5, "1959Q2": 13.0}
    # 1959Q1 ends 1959-03-31; 60 days later (1959-05-30) the second estimate is in force
    assert _q(c.lagged(60, "Q"))["1959Q1"] == 10.5
    assert c.first_release == np.datetime64("1959-04-30")
    assert c.release_dates("out").astype(str).tolist() == ["1959-04-30", "1959-05-29", "1959-07-30",
                                                           "1970-02-01"]


def test_index_memory_grows_with_values_not_release_days():
    """The same number of values on 10 or on 2,000 release days takes about the same index memory."""
    def log_on(n_days: int) -> pd.DataFrame:
        n = 2000  # 20 monthly variables x 100 months, one release each
        months = pd.period_range("1990-01", periods=100, freq="M").astype(str)
        days = pd.Timestamp("1999-01-01") + pd.to_timedelta(np.arange(n) % n_days, unit="D")
        return pd.DataFrame({"variable": np.repeat([f"v{k:02d}" for k in range(20)], 100),
                             "period": np.tile(months, 20), "release": days, "value": 1.0})

    meta = {f"v{k:02d}": {"freq": "M"} for k in range(20)}
    few, many = (Cube.from_log(log_on(n), meta) for n in (10, 2000))
    assert len(few.indexes["M"].releases) == 10 and len(many.indexes["M"].releases) == 2000
    # a dense release x variable x period array would be 200 times larger for `many`
    assert many.nbytes < 1.5 * few.nbytes


def test_estimate_number_must_be_positive(cube):
    """estimate(0) is refused with a ValueError naming the bad number."""
    with pytest.raises(ValueError, match="got 0"):
        cube.estimate(0, "Q")


def test_views_of_a_cube_without_releases():
    """A variable with no releases yet gives empty or all-NaN views rather than an IndexError."""
    empty = LOG.iloc[0:0]
    c = Cube.from_log(empty, {"out": {"freq": "Q"}})
    assert c.asof("2020-01-01").to_frame().empty
    for da in (c.latest("Q"), c.first("Q"), c.lagged(30, "Q")):
        assert da.sizes["variable"] == 1 and bool(da.isnull().all())
