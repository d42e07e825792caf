"""Revision statistics and the news-versus-noise regressions.

References
----------
Mankiw, N. G. and Shapiro, M. D. (1986). News or noise? An analysis of GNP revisions.
    Survey of Current Business 66(5), 20-25.
Newey, W. K. and West, K. D. (1987). Econometrica 55(3), 703-708; (1994) Review of Economic
    Studies 61(4), 631-653.
Orphanides, A. and van Norden, S. (2002). Review of Economics and Statistics 84(4), 569-583.
"""

from __future__ import annotations

import io
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from vintages.cube import Cube
from vintages.periods import format_periods, period_end
from vintages.revisions import COLUMNS, newey_west_lags, ols_hac, revision_stats, revisions_table


def _two_estimate_cube(first: np.ndarray, final: np.ndarray, start: str = "1990Q1") -> Cube:
    """Quarterly variable 'g': a first estimate 30 days after each quarter, the final in one last release."""
    p0 = pd.Period(start, "Q").ordinal
    ords = p0 + np.arange(len(first))
    labels = format_periods(ords, "Q")
    rel1 = period_end(ords, "Q") + np.timedelta64(30, "D")
    last = rel1[-1] + np.timedelta64(400, "D")
    df = pd.DataFrame(
        {
            "variable": "g",
            "period": np.concatenate([labels, labels]),
            "release": pd.to_datetime(np.concatenate([rel1, np.full(len(ords), last)])),
            "value": np.concatenate([first, final]),
        }
    )
    return Cube.from_log(df, {"g": {"freq": "Q"}})


def _ar1(rng, n, phi=0.5, sd=1.0):
    e = rng.normal(0, sd, n)
    x = np.empty(n)
    x[0] = e[0]
    for t in range(1, n):  # test data only
        x[t] = phi * x[t - 1] + e[t]
    return x


@pytest.mark.parametrize("lags", [0, 3, 8])
@pytest.mark.parametrize("small_sample", [False, True])
def test_ols_hac_matches_statsmodels(lags, small_sample):
    """Coefficients, HAC standard errors, t and p equal statsmodels OLS cov_type='HAC' (reference library)."""
    rng = np.random.default_rng(100 + lags)
    n = 150
    x = _ar1(rng, n, 0.7)
    y = 0.3 + 0.8 * x + _ar1(rng, n, 0.6)
    X = sm.add_constant(x)
    ref = sm.OLS(y, X).fit(
        cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": small_sample}
    )
    got = ols_hac(y, X, lags, small_sample=small_sample)
    np.testing.assert_allclose(got["beta"], ref.params, rtol=1e-10)
    np.testing.assert_allclose(got["se"], ref.bse, rtol=1e-10)
    np.testing.assert_allclose(got["t"], ref.tvalues, rtol=1e-10)
    np.testing.assert_allclose(got["p"], ref.pvalues, rtol=1e-8)


def test_revision_stats_match_direct_computation_and_statsmodels():
    """Summary statistics equal a direct computation and the slopes equal statsmodels HAC OLS on the same pairs."""
    rng = np.random.default_rng(2024)
    n = 120
    final = 0.5 + _ar1(rng, n, 0.4)
    first = final + rng.normal(0, 0.4, n) - 0.1
    cube = _two_estimate_cube(first, final)
    res = revision_stats(cube, "g", "level", "first", "latest")
    # the cube's own first/latest views: an independent path to the same pairs
    e = cube.first("Q").sel(variable="g").values
    lt = cube.latest("Q").sel(variable="g").values
    r = lt - e
    L = newey_west_lags(n)
    assert res["n"] == n and res["hac_lags"] == L
    assert res["mean"] == pytest.approx(r.mean())
    assert res["mean_abs"] == pytest.approx(np.abs(r).mean())
    assert res["std"] == pytest.approx(pd.Series(r).std())
    assert res["noise_to_signal"] == pytest.approx(pd.Series(r).std() / pd.Series(lt).std())
    assert res["sign_change_share"] == pytest.approx(np.mean(np.sign(e) != np.sign(lt)))
    for key, x in (("noise", lt), ("news", e)):
        ref = sm.OLS(r, sm.add_constant(x)).fit(cov_type="HAC", cov_kwds={"maxlags": L})
        assert res[f"{key}_slope"] == pytest.approx(ref.params[1], rel=1e-10)
        assert res[f"{key}_se"] == pytest.approx(ref.bse[1], rel=1e-10)
        assert res[f"{key}_t"] == pytest.approx(ref.tvalues[1], rel=1e-10)
        assert res[f"{key}_p"] == pytest.approx(ref.pvalues[1], rel=1e-8)
    ref = sm.OLS(r, np.ones(n)).fit(cov_type="HAC", cov_kwds={"maxlags": L})
    assert res["mean_se"] == pytest.approx(ref.bse[0], rel=1e-10)


def test_news_and_noise_hypotheses_are_told_apart():
    """Pure noise: revision uncorrelated with the later estimate; pure news: with the earlier (Mankiw and Shapiro 1986)."""
    rng = np.random.default_rng(7)
    n = 400
    final = _ar1(rng, n, 0.3)
    noisy_first = final + rng.normal(0, 0.7, n)  # noise: first = final + independent error
    noise = revision_stats(_two_estimate_cube(noisy_first, final), "g", "level")
    assert noise["noise_p"] > 0.05 and noise["news_slope"] < 0 and noise["news_p"] < 0.001
    signal = rng.normal(0, 1.0, n)
    later = signal + rng.normal(
        0, 0.7, n
    )  # news: first = E[later | signal], revision = later - first
    news = revision_stats(_two_estimate_cube(signal, later), "g", "level")
    assert news["news_p"] > 0.05 and news["noise_slope"] > 0 and news["noise_p"] < 0.001


def test_revisions_of_growth_are_computed_inside_each_vintage():
    """The revision of a growth rate compares growth computed in the first vintage with growth in the latest."""
    rows = [
        ("gdp", "2009Q4", "2010-01-30", 100.0),
        ("gdp", "2009Q4", "2010-04-30", 101.0),
        ("gdp", "2010Q1", "2010-04-30", 102.0),
        ("gdp", "2009Q4", "2010-07-30", 101.5),
        ("gdp", "2010Q1", "2010-07-30", 102.1),
        ("gdp", "2010Q2", "2010-07-30", 103.0),
    ]
    df = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    df["release"] = pd.to_datetime(df["release"])
    cube = Cube.from_log(df, {"gdp": {"freq": "Q"}})
    res = revision_stats(cube, "gdp", "dlog", periods=["2010Q1"])
    # first estimate of 2010Q1 growth: vintage 2010-04-30, 100 ln(102.0/101.0);
    # latest: vintage 2010-07-30, 100 ln(102.1/101.5). A mixed-level growth rate (first 2010Q1 over
    # the 2009Q4 first printed in January, 100 ln(102.0/100.0)) would be wrong.
    expected = 100 * math.log(102.1 / 101.5) - 100 * math.log(102.0 / 101.0)
    assert res["n"] == 1 and res["mean"] == pytest.approx(expected, rel=1e-12)
    assert math.isnan(res["noise_slope"])  # too few pairs: NaN, not an error


def test_newey_west_rule_of_thumb():
    """floor(4 (n/100)^(2/9)) (Newey and West 1994; constant from memory): 4 at n=100, 5 at n=500."""
    assert [newey_west_lags(n) for n in (0, 30, 100, 500)] == [0, 3, 4, 5]


def test_revisions_table_is_printable_and_round_trips_csv():
    """revisions_table has the documented columns, one row per variable × pair, and survives CSV."""
    rng = np.random.default_rng(5)
    final = 1 + _ar1(rng, 60)
    cube = _two_estimate_cube(final + rng.normal(0, 0.3, 60), final)
    tab = revisions_table(
        cube, ["g"], transform="level", pairs=[("first", "latest"), ("first", "lag:500D")]
    )
    assert list(tab.columns) == list(COLUMNS) and len(tab) == 2
    back = pd.read_csv(io.StringIO(tab.to_csv(index=False)))
    np.testing.assert_allclose(back["mean_abs"], tab["mean_abs"])
    assert list(back["to"]) == ["latest", "lag:500D"]


def test_demo_gdp_revisions_are_plausible():
    """Veldmark gdp growth revisions (first -> latest) have a mean absolute size of 0.1-1.5 pp (common practice)."""
    demo = pytest.importorskip("vintages.demo")
    data = demo.simulate()
    cube = Cube.from_log(data.releases, data.variables)
    res = revision_stats(cube, "gdp", "dlog_ann", "first", "latest")
    assert res["n"] > 80
    assert 0.1 <= res["mean_abs"] <= 1.5
    assert 0 < res["noise_to_signal"] < 1
