"""Tests of the invented Veldmark economy and its statistics office (vintages/demo.py).

Sources of the checks
---------------------
* Organisation of a real-time data set (each vintage holds the whole history as known on its
  date): Croushore, D. and Stark, T. (2001), "A real-time data set for macroeconomists",
  Journal of Econometrics 105(1), 111-130.
* News versus noise revisions: Mankiw, N. G. and Shapiro, M. D. (1986), "News or noise? An
  analysis of GNP revisions", Survey of Current Business 66(5), 20-25. Under pure news the
  revision is uncorrelated with the early estimate; under pure noise it is uncorrelated with
  the final value; a mix gives a negative slope on the former and a positive one on the latter.
  The regressions are run with statsmodels' OLS as the reference implementation.
* Sizes of output revisions (a few tenths of a point, non-zero mean): Aruoba, S. B. (2008),
  "Data revisions are not well behaved", Journal of Money, Credit and Banking 40(2-3), 319-340
  (from memory); the numeric ranges used below are common practice, not taken from a table.
* Volume and page numbers of the references above are from memory.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from vintages.demo import (
    DEFAULT_SEED,
    build_demo_store,
    chronology,
    recession_quarters,
    simulate,
    write_chronology,
)
from vintages.periods import parse_periods, period_end

# The scenario's publication lags in days after the period ends (the task's specification).
LAGS = {"gdp": 30, "cpi": 13, "unemp": 30, "ip": 45, "survey": 1}
FREQ = {"gdp": "Q", "cpi": "M", "unemp": "M", "ip": "M", "survey": "M"}


@pytest.fixture(scope="module")
def demo():
    return simulate()


@pytest.fixture(scope="module")
def many():
    """Simulations for seeds 0-11, shared by the tests that pool or count over seeds."""
    return {seed: simulate(seed) for seed in range(12)}


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    return build_demo_store(tmp_path_factory.mktemp("veldmark") / "store")


def _triangle(releases: pd.DataFrame, name: str) -> pd.DataFrame:
    """Release dates × periods (sorted chronologically) of one variable; NaN = not published."""
    sub = releases[releases["variable"] == name]
    tri = sub.pivot(index="release", columns="period", values="value")
    order = np.argsort(parse_periods(tri.columns.to_numpy())[0])
    return tri.iloc[:, order]


def _gdp_growth(tri: pd.DataFrame) -> pd.DataFrame:
    """Annualised q/q log growth (percent) inside each vintage."""
    return 400.0 * np.log(tri).diff(axis=1)


def _first_and_latest(tri: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
    """First published and latest value of each column (periods only ever enter, never leave)."""
    return tri.bfill().iloc[0], tri.iloc[-1]


def _ends(periods, freq: str) -> np.ndarray:
    return period_end(parse_periods(np.asarray(periods))[0], freq)


# ---------------------------------------------------------------------------- determinism
def test_same_seed_gives_identical_releases(demo):
    """Two simulations with the same seed produce identical release logs and truths."""
    again = simulate(DEFAULT_SEED)
    pd.testing.assert_frame_equal(demo.releases, again.releases)
    for name, series in demo.final.items():
        pd.testing.assert_series_equal(series, again.final[name])


def test_other_seed_changes_values_not_calendar(demo):
    """Another seed changes the values but keeps the release calendar (same cells)."""
    other = simulate(DEFAULT_SEED + 1)
    key = ["variable", "period", "release"]
    pd.testing.assert_frame_equal(demo.releases[key], other.releases[key])
    assert not np.array_equal(demo.releases["value"].to_numpy(), other.releases["value"].to_numpy())


# ---------------------------------------------------------------------------- release mechanics
def test_every_release_is_after_its_period_end(demo):
    """Every value is released strictly after the end of its reference period."""
    r = demo.releases
    for name, freq in FREQ.items():
        sub = r[r["variable"] == name]
        ends = _ends(sub["period"], freq)
        assert (sub["release"].to_numpy().astype("datetime64[D]") > ends).all(), name


def test_calendar_span_and_history(demo):
    """Releases run from January 1996 to 30 November 2026 and the first vintages reach back to 1995."""
    r = demo.releases
    assert r["release"].min() >= pd.Timestamp("1996-01-01")
    assert r["release"].max() <= pd.Timestamp("2026-11-30")
    for name, freq in FREQ.items():
        tri = _triangle(r, name)
        assert tri.index[0] < pd.Timestamp("1996-02-15"), name
        assert tri.columns[tri.iloc[0].notna().to_numpy()][0] == (
            "1995Q1" if freq == "Q" else "1995-01"
        )
    gdp = r[r["variable"] == "gdp"]
    last_q = gdp.loc[gdp["release"] == gdp["release"].max(), "period"]
    assert sorted(last_q, key=lambda p: parse_periods([p])[0][0])[-1] == "2026Q3"
    first_of_last = gdp.loc[gdp["period"] == "2026Q3", "release"].min()
    assert first_of_last == pd.Timestamp("2026-10-30")


def test_each_release_is_a_complete_vintage(demo):
    """Each release date publishes an unbroken history from the first period (Croushore and Stark, 2001)."""
    for name in FREQ:
        tri = _triangle(demo.releases, name)
        known = tri.notna().to_numpy()
        n_known = known.sum(axis=1)
        # a complete vintage: the first n periods and nothing else
        assert (known == (np.arange(known.shape[1])[None, :] < n_known[:, None])).all(), name
        # a period, once published, stays in every later vintage
        assert (np.diff(n_known) >= 0).all(), name


@pytest.mark.parametrize("name", sorted(LAGS))
def test_first_release_lag(demo, name):
    """The first estimate of each period appears at the scenario's lag (gdp about 30 days after the quarter)."""
    r = demo.releases
    sub = r[r["variable"] == name]
    first = sub.groupby("period")["release"].min()
    first = first[first > first.min()]  # periods in the first kept vintage were published earlier
    lag = first.to_numpy().astype("datetime64[D]") - _ends(first.index, FREQ[name])
    lag = lag.astype(np.int64)
    if name == "gdp":
        assert ((lag >= 28) & (lag <= 32)).all()
    assert (lag == LAGS[name]).all(), (name, np.unique(lag))


def test_row_count_within_budget(demo):
    """The release log stays under 600 000 rows."""
    assert 100_000 < len(demo.releases) < 600_000


# ---------------------------------------------------------------------------- revision patterns
def test_survey_is_never_revised(demo):
    """Every survey period carries the same value in every vintage."""
    tri = _triangle(demo.releases, "survey")
    assert (tri.nunique(axis=0) == 1).all()


def test_cpi_is_rarely_revised(demo):
    """Only a handful of cpi periods are ever revised, each corrected once in the very next release."""
    tri = _triangle(demo.releases, "cpi")
    revised = tri.columns[(tri.nunique(axis=0) > 1).to_numpy()]
    assert 1 <= len(revised) <= 6
    for p in revised:
        col = tri[p].dropna()
        changes = np.flatnonzero(np.diff(col.to_numpy()) != 0)
        assert list(changes) == [0], p


def test_unemp_revised_only_in_january_for_three_years(demo):
    """Published unemployment changes only in January releases, and only for the three previous years."""
    tri = _triangle(demo.releases, "unemp")
    change = (tri.diff(axis=0).abs() > 0).to_numpy()
    rel = tri.index
    assert change.any()
    assert not change[rel.month != 1].any()
    years = np.array([int(p[:4]) for p in tri.columns])
    for i in np.flatnonzero(rel.month == 1):
        cols = np.flatnonzero(change[i])
        assert ((years[cols] >= rel[i].year - 3) & (years[cols] <= rel[i].year - 1)).all()


def test_ip_revised_in_next_two_releases_only(demo):
    """Industrial production is revised in the two releases after the first and never again."""
    tri = _triangle(demo.releases, "ip").to_numpy()
    first_row = np.argmax(~np.isnan(tri), axis=0)
    later = np.arange(tri.shape[0])[:, None] >= first_row[None, :] + 2
    settled = np.where(later, tri, np.nan)
    ok = (~np.isnan(settled)).any(axis=0)
    spread = np.nanmax(settled[:, ok], axis=0) - np.nanmin(settled[:, ok], axis=0)
    assert ok.sum() > 300 and np.allclose(spread, 0.0)
    # and the first two estimates do get revised for most months (first row in the calendar only)
    in_cal = first_row > 0
    first = tri[first_row, np.arange(tri.shape[1])]
    assert np.mean(first[in_cal & ok] != tri[-1][in_cal & ok]) > 0.5


def test_gdp_mean_absolute_revision_is_plausible(demo):
    """First-to-latest revisions of gdp growth average 0.1-1.5 pp in absolute value (common practice)."""
    first, latest = _first_and_latest(_gdp_growth(_triangle(demo.releases, "gdp")))
    rev = (latest - first).dropna()
    assert len(rev) > 100
    assert 0.1 <= rev.abs().mean() <= 1.5
    assert 0.0 < rev.mean() < 0.5  # slight upward revision bias (common practice; Aruoba, 2008)


def test_gdp_benchmark_revisions_are_larger(demo):
    """Per revised quarter, August (benchmark) revisions of gdp growth exceed the other months' (common practice)."""
    growth = _gdp_growth(_triangle(demo.releases, "gdp"))
    step = growth.diff(axis=0).abs().to_numpy()
    august = growth.index.month == 8
    revised = step > 1e-9
    bench = step[august][revised[august]]
    regular = step[~august][revised[~august]]
    assert len(bench) > 100 and len(regular) > 100
    assert bench.mean() > 1.3 * regular.mean()
    # benchmarks reach back about three years: quarters older than that are untouched
    touched = revised[august].sum(axis=1)
    assert touched.max() <= 14


def test_gdp_revisions_mix_news_and_noise(many):
    """Pooled over seeds, revisions correlate negatively with first and positively with final values (Mankiw and Shapiro, 1986)."""
    firsts, finals = [], []
    for d in many.values():
        tri = _triangle(d.releases, "gdp")
        first, latest = _first_and_latest(_gdp_growth(tri))
        periods = pd.PeriodIndex(first.index, freq="Q")
        # Quarters through 2022 have passed all three benchmarks (latest = final); the sudden-stop
        # year is left out because its two extreme quarters would dominate the second moments.
        keep = (
            (periods <= pd.Period("2022Q4", "Q")) & (periods.year != 2017)
        ) & first.notna().to_numpy()
        firsts.append(first[keep].to_numpy())
        finals.append(latest[keep].to_numpy())
    first, final = np.concatenate(firsts), np.concatenate(finals)
    rev = final - first
    on_first = sm.OLS(rev, sm.add_constant(first)).fit()
    on_final = sm.OLS(rev, sm.add_constant(final)).fit()
    assert on_first.params[1] < 0 and on_first.tvalues[1] < -2.0  # noise present
    assert on_final.params[1] > 0 and on_final.tvalues[1] > 2.0  # news present


def test_latest_equals_truth_once_final(demo):
    """Periods past all their revisions are published at their true values, up to rounding."""
    r = demo.releases
    last = r[r["release"] == r.groupby("variable")["release"].transform("max")]
    cutoff = {
        "gdp": "2022Q4",
        "cpi": "2026-06",
        "unemp": "2022-12",
        "ip": "2026-06",
        "survey": "2026-10",
    }
    tol = {
        "gdp": 5e-4 + 1e-9,
        "cpi": 5e-3 + 1e-9,
        "unemp": 0.05 + 1e-9,
        "ip": 5e-3 + 1e-9,
        "survey": 0.05 + 1e-9,
    }
    for name, freq in FREQ.items():
        s = last[last["variable"] == name].set_index("period")["value"]
        s.index = pd.PeriodIndex(s.index, freq=freq)
        s = s[s.index <= pd.Period(cutoff[name], freq)]
        truth = demo.final[name].reindex(s.index)
        assert np.abs(s.to_numpy() - truth.to_numpy()).max() <= tol[name], name


# ---------------------------------------------------------------------------- the economy
def _episode_growth(d) -> tuple[float, float, list[float]]:
    """Mean final gdp growth in recession quarters, in expansion quarters, and per recession."""
    growth = 400.0 * np.log(d.final["gdp"]).diff()
    in_rec = growth.index.isin(recession_quarters(d.chronology))
    episodes = [
        growth[(growth.index > pd.Period(p, "Q")) & (growth.index <= pd.Period(t, "Q"))].mean()
        for p, t in d.chronology.itertuples(index=False)
    ]
    return growth[in_rec].mean(), growth[~in_rec].mean(), episodes


def test_recessions_have_negative_growth(demo):
    """In the shipped scenario each dated recession has clearly negative gdp growth, expansions positive (common practice)."""
    rec, exp, episodes = _episode_growth(demo)
    assert rec < -2.0 and exp > 1.0
    assert len(episodes) == 3 and max(episodes) < -0.5


def test_recessions_negative_across_seeds(many):
    """For other seeds too, nearly every dated recession shows negative average gdp growth."""
    results = [_episode_growth(d) for d in many.values()]
    assert all(rec < -2.0 and exp > 1.0 for rec, exp, _ in results)
    # The mild recession is a few points of annualised growth against quarterly noise of about
    # two points, so an occasional seed may mask it; the deep one and the sudden stop never.
    hits = np.array([[e < -0.5 for e in eps] for _, _, eps in results])
    assert hits[:, 1:].all()
    assert hits[:, 0].mean() >= 10 / 12


def test_indicators_lead_coincide_and_lag(demo):
    """Survey leads gdp growth, ip growth is coincident and unemployment changes lag (common practice)."""
    fin = demo.final
    g = 400.0 * np.log(fin["gdp"]).diff()

    def quarterly(s):
        return s.groupby(s.index.asfreq("Q")).mean()

    x = pd.DataFrame(
        {
            "g": g,
            "ip": 400.0 * np.log(quarterly(fin["ip"])).diff(),
            "survey": quarterly(fin["survey"]),
            "du": quarterly(fin["unemp"]).diff(),
        }
    ).dropna()

    def corr(col, k):  # corr(g_t, x_{t+k})
        return x["g"].corr(x[col].shift(-k))

    assert corr("survey", -1) > max(corr("survey", 0), corr("survey", 1))
    assert corr("ip", 0) > max(abs(corr("ip", -1)), abs(corr("ip", 1)))
    assert corr("du", 1) < min(corr("du", 0), corr("du", -1))


def test_metadata_and_description(demo):
    """Each variable has frequency, units and description, and the scenario is described as invented."""
    assert sorted(demo.variables) == sorted(FREQ)
    for name, meta in demo.variables.items():
        assert meta["freq"] == FREQ[name]
        assert meta["units"] and meta["description"]
    assert "invented" in demo.description
    for name, s in demo.final.items():
        assert isinstance(s.index, pd.PeriodIndex) and s.notna().all(), name


# ---------------------------------------------------------------------------- chronology file
def test_write_chronology_round_trip(tmp_path):
    """The chronology CSV has columns peak,trough and reads back unchanged."""
    path = write_chronology(tmp_path / "chronology.csv")
    assert path.read_text().splitlines()[0] == "peak,trough"
    back = pd.read_csv(path, dtype=str)
    pd.testing.assert_frame_equal(back, chronology().astype(str), check_dtype=False)


def test_write_chronology_errors(tmp_path):
    """A missing directory or a frame without peak/trough is refused with a message naming the problem."""
    with pytest.raises(FileNotFoundError, match="does not exist"):
        write_chronology(tmp_path / "absent" / "chronology.csv")
    with pytest.raises(ValueError, match=r"lacks column\(s\) \['trough'\]"):
        write_chronology(tmp_path / "c.csv", pd.DataFrame({"peak": ["2001Q1"]}))


# ---------------------------------------------------------------------------- the store
def test_store_opens_and_verifies(store, demo):
    """The built store verifies, holds the five variables with metadata, and reads back every release."""
    assert store.verify() == []
    assert sorted(store.variables) == sorted(FREQ)
    assert store.variables["gdp"]["units"] == demo.variables["gdp"]["units"]
    log = store.read_log(with_superseded=False)
    key = ["variable", "period", "release"]
    a = log[key + ["value"]].sort_values(key).reset_index(drop=True)
    b = demo.releases[key + ["value"]].sort_values(key).reset_index(drop=True)
    assert len(a) == len(b)
    assert (a["variable"].astype(str).to_numpy() == b["variable"].astype(str).to_numpy()).all()
    assert (a["period"].astype(str).to_numpy() == b["period"].astype(str).to_numpy()).all()
    assert (a["release"].to_numpy() == b["release"].to_numpy()).all()
    assert np.array_equal(a["value"].to_numpy(), b["value"].to_numpy())


def test_store_from_given_data_matches(tmp_path, demo, store):
    """Building from an already simulated data set gives the same committed batches as simulating."""
    other = build_demo_store(tmp_path / "store", data=demo)
    sha = [b["sha256"] for b in other.manifest()["batches"]]
    assert sha == [b["sha256"] for b in store.manifest()["batches"]]
    assert other.checksum() == store.checksum()


def test_store_building_twice_is_refused(store):
    """Building into an existing store directory fails instead of mixing two data sets."""
    with pytest.raises(FileExistsError):
        build_demo_store(store.path)


@pytest.mark.parametrize("date", ["2020-05-15", "2009-02-14", "2026-11-15"])
def test_asof_gives_ragged_edge(store, demo, date):
    """At a mid-quarter date each variable ends at its lag's last period: survey later than gdp."""
    vintage = store.cube().asof(date)
    d = np.datetime64(date, "D")
    ends = {}
    for name, freq in FREQ.items():
        s = vintage[name]
        last = s.index[-1]
        ends[name] = period_end([last.ordinal], freq)[0]
        assert ends[name] + np.timedelta64(LAGS[name], "D") <= d, name
        nxt = period_end([last.ordinal + 1], freq)[0]
        assert nxt + np.timedelta64(LAGS[name], "D") > d, name
        # the as-of values are exactly the latest vintage released on or before the date
        sub = demo.releases[demo.releases["variable"] == name]
        rel = sub.loc[sub["release"] <= pd.Timestamp(date), "release"].max()
        expected = sub[sub["release"] == rel].set_index("period")["value"]
        got = s.copy()
        got.index = got.index.astype(str)
        pd.testing.assert_series_equal(
            got.sort_index(), expected.sort_index(), check_names=False, check_index_type=False
        )
    assert ends["survey"] > ends["gdp"]


def test_kth_estimate_is_kth_vintage(store):
    """In the store's cube the second and third gdp estimates arrive about 60 and 90 days after the quarter."""
    cube = store.cube()
    for k, lag in ((1, 30), (2, 60), (3, 90)):
        est = cube.estimate(k, "Q").sel(variable="gdp")
        rel = est["release_date"].values
        ends_all = period_end(est["period"].to_index().asi8, "Q")
        # quarters first estimated before the kept calendar began enter it at a later stage
        ok = ~np.isnat(rel) & (ends_all + np.timedelta64(30, "D") >= np.datetime64("1996-01-01"))
        ends = ends_all[ok]
        days = (rel[ok].astype("datetime64[D]") - ends).astype(np.int64)
        assert ok.sum() > 100
        assert ((days >= lag - 2) & (days <= lag + 1)).all(), (k, np.unique(days))
