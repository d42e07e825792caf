"""News decomposition: adding up, agreement with statsmodels' news, the presentation helpers."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from harness.models import BayesianVAR, DynamicFactorModel, NoChange
from harness.models.bvar import ragged_split
from harness.models.conditional import conditional_moments
from harness.models.dfm_native import make_native_infoset, simulated_native_panel
from harness.models.dfm_ssm import to_statsmodels_vector
from harness.models.news import (
    KINDS,
    news_by_variable,
    news_decomposition,
    news_table,
    plot_news,
)
from harness.testing import make_infoset, simulated_panel

sm = pytest.importorskip("statsmodels.api")

NAMES = [f"ind{i}" for i in range(6)]


@pytest.fixture(scope="module")
def dfm_case():
    """Two origins a fortnight apart: new indicator months, one revision, one quarter of output."""
    mon, q = simulated_native_panel(123, 6, 0, ragged=False)
    mo, qo = mon[:121].copy(), q[:121].copy()
    mo[-2:, :3] = np.nan
    mo[-1, 3:] = np.nan
    qo[-3:] = np.nan
    mn, qn = mon[:122].copy(), q[:122].copy()
    mn[-1, 1:] = np.nan
    qn[-3:] = np.nan
    mn[118, 2] += 0.7  # a revision close to the end (a far one has a negligible weight)
    io = make_native_infoset(mo, qo, NAMES, ["gdp"], start="2000-01", origin="2010-03-05")
    inn = make_native_infoset(mn, qn, NAMES, ["gdp"], start="2000-01", origin="2010-03-20")
    model = DynamicFactorModel()
    return model, io, inn, news_decomposition(model, io, inn, "gdp", 0)


def test_dfm_contributions_add_up_to_the_change_of_the_nowcast(dfm_case):
    """News + revisions + re-estimation + remainder = total, with a remainder below 1e-10."""
    model, io, inn, fr = dfm_case
    body = fr[fr["kind"].isin(["news", "revision", "reestimation", "remainder"])]
    total = fr.loc[fr["kind"] == "total", "contribution"].item()
    assert body["contribution"].sum() == pytest.approx(total, abs=1e-12)
    assert abs(fr.loc[fr["kind"] == "remainder", "contribution"].item()) < 1e-10
    # the end points are the model's own point nowcasts at each origin (computed independently)
    quarter = pd.Period("2010Q1")
    f_old = model.nowcast_mean(model.fit(io), "gdp", quarter)
    f_new = model.nowcast_mean(model.fit(inn), "gdp", quarter)
    assert fr.attrs["forecast_old"] == pytest.approx(f_old, abs=1e-10)
    assert fr.attrs["forecast_new"] == pytest.approx(f_new, abs=1e-10)
    assert total == pytest.approx(f_new - f_old, abs=1e-10)
    news = fr.loc[fr["kind"] == "news", "contribution"].sum()
    assert news == pytest.approx(fr.attrs["news_total"], abs=1e-10)
    assert (fr["kind"] == "news").sum() == 10 and (fr["kind"] == "revision").sum() == 1


def test_dfm_news_equals_statsmodels_news_at_the_same_parameters(dfm_case):
    """Per-release news, weights and impacts equal statsmodels' MLEResults.news (same params)."""
    model, io, inn, fr = dfm_case
    fit = model.fit(io)
    month = pd.Period("2010-03", "M")
    idx = pd.period_range("2000-01", month, freq="M")
    cols = [*NAMES, "gdp"]
    std = (pd.Series(fit.mean, index=cols), pd.Series(fit.scale, index=cols))

    def results(info):
        endog = pd.DataFrame(info.values(), index=info.periods, columns=cols).reindex(idx)
        mod = sm.tsa.DynamicFactorMQ(endog, k_endog_monthly=6, factors=1, factor_orders=2,
                                     standardize=std)
        return mod.smooth(to_statsmodels_vector(fit.params))

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nw = results(inn).news(results(io), impact_date=month, impacted_variable="gdp",
                               comparison_type="previous", revisions_details_start=True)
    det = nw.details_by_impact.reset_index()
    ours = fr[fr["kind"] == "news"]
    assert len(det) == len(ours)
    for row in ours.itertuples():
        hit = det[(det["update date"].astype(str) == row.period)
                  & (det["updated variable"] == row.variable)].iloc[0]
        assert row.contribution == pytest.approx(hit["impact"], abs=1e-8)
        assert row.expected == pytest.approx(hit["forecast (prev)"], abs=1e-8)
        assert row.weight == pytest.approx(hit["weight"], abs=1e-8)
    rev = nw.revision_details_by_impact.reset_index()
    ours_rev = fr[fr["kind"] == "revision"]
    assert ours_rev["contribution"].item() == pytest.approx(rev["impact"].item(), abs=1e-10)
    prev = nw.impacts["estimate (prev)"].item()
    assert fr.attrs["forecast_old"] == pytest.approx(prev, abs=1e-8)
    at_old = fr.loc[fr["kind"] == "reestimation", "expected"].item()  # new data, old parameters
    assert at_old == pytest.approx(nw.impacts["estimate (new)"].item(), abs=1e-8)


@pytest.fixture(scope="module")
def bvar_case():
    y = simulated_panel(80, 3, seed=0, ragged=False)
    old = y.copy()
    old[-1, 1:] = np.nan
    old[-2, 2] = np.nan
    new = y.copy()
    new[-1, 2] = np.nan
    new[-3, 0] += 0.3  # a revision inside the VAR's conditioning rows
    vs = ["output", "prices", "jobs"]
    io = make_infoset(old, vs, origin="2010-01-10")
    inn = make_infoset(new, vs, origin="2010-01-25")
    model = BayesianVAR(lags=2)
    return model, io, inn, news_decomposition(model, io, inn, "output", 1)


def test_bvar_decomposition_adds_up_and_matches_statsmodels_varmax_news(bvar_case):
    """BVAR at its posterior mean: adds up; equals VARMAX news (statsmodels) at those parameters."""
    model, io, inn, fr = bvar_case
    total = fr.loc[fr["kind"] == "total", "contribution"].item()
    assert fr.loc[fr["kind"] != "total", "contribution"].sum() == pytest.approx(total, abs=1e-12)
    assert abs(fr.loc[fr["kind"] == "remainder", "contribution"].item()) < 1e-10
    old = io.values()
    start, stop, _ = ragged_split(old)
    post = model.fit_sample(old[start:stop], io.variables)
    # the old end point is the BVAR's own conditional forecast anchored at its balanced end
    target_row = (inn.current + 1).ordinal - io.periods[0].ordinal
    steps = target_row - stop + 1
    mean, _ = conditional_moments(post.coef_mean, post.mean_sigma(), old[stop - 2:stop], steps,
                                  old[stop:])
    assert fr.attrs["forecast_old"] == pytest.approx(mean[-1, 0], abs=1e-10)
    n, p = 3, 2
    a = [post.coef_mean[i * n:(i + 1) * n].T for i in range(p)]
    chol = np.linalg.cholesky(post.mean_sigma())
    params = np.r_[post.coef_mean[-1], np.concatenate(a, axis=1).ravel(), chol[np.tril_indices(n)]]
    idx = pd.period_range(io.periods[0], inn.current + 1, freq="Q")

    def results(info):
        endog = pd.DataFrame(info.values(), index=info.periods, columns=info.variables).reindex(idx)
        return sm.tsa.VARMAX(endog, order=(p, 0), trend="c").smooth(params)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nw = results(inn).news(results(io), impact_date=idx[-1], impacted_variable="output",
                               comparison_type="previous", revisions_details_start=True)
    det = nw.details_by_impact.reset_index()
    for row in fr[fr["kind"] == "news"].itertuples():
        hit = det[(det["update date"].astype(str) == row.period)
                  & (det["updated variable"] == row.variable)].iloc[0]
        assert row.contribution == pytest.approx(hit["impact"], abs=1e-8)
        assert row.expected == pytest.approx(hit["forecast (prev)"], abs=1e-8)
    rev = nw.revision_details_by_impact["impact"].sum()
    assert fr.loc[fr["kind"] == "revision", "contribution"].sum() == pytest.approx(rev, abs=1e-8)
    assert fr.attrs["forecast_old"] == pytest.approx(nw.impacts["estimate (prev)"].item(), abs=1e-8)


def test_frame_is_tidy_and_typed(dfm_case):
    """Columns and dtypes are fixed: str labels, ordered categorical kind, float64 numbers."""
    fr = dfm_case[3]
    assert list(fr.columns) == ["variable", "period", "kind", "actual", "expected", "weight",
                                "contribution"]
    assert list(fr["kind"].cat.categories) == list(KINDS) and fr["kind"].cat.ordered
    for c in ("actual", "expected", "weight", "contribution"):
        assert fr[c].dtype == np.float64
    assert pd.api.types.is_string_dtype(fr["variable"]) and pd.api.types.is_string_dtype(fr["period"])
    assert list(fr["kind"].astype(str).iloc[-3:]) == ["reestimation", "remainder", "total"]


def test_presentation_helpers_group_by_variable_and_draw(dfm_case):
    """news_by_variable sums per variable and kind; the table and the bar chart render."""
    fr = dfm_case[3]
    g = news_by_variable(fr)
    news = fr[fr["kind"] == "news"].groupby("variable")["contribution"].sum()
    for v, c in news.items():
        got = g[(g["variable"] == v) & (g["kind"] == "news")]["contribution"].item()
        assert got == pytest.approx(c, abs=1e-14)
    assert g["count"].dtype == np.int64
    text = news_table(fr)
    assert "dfm: gdp 2010Q1" in text and "reestimation" in text
    fig = plot_news(fr)
    assert len(fig.axes[0].patches) == len(g) - 1  # every row but the total is a bar


def test_a_value_dropped_from_the_new_set_lands_in_the_remainder(dfm_case):
    """A cell published before but missing now is no news: its effect is the remainder."""
    model, io, inn, _ = dfm_case
    vals = inn.values().copy()
    vals[100, 4] = np.nan
    mon, q = vals[:, :6], vals[:, 6:]
    dropped = make_native_infoset(mon, q, NAMES, ["gdp"], start="2000-01", origin="2010-03-20")
    fr = news_decomposition(model, io, dropped, "gdp", 0)
    rem = fr.loc[fr["kind"] == "remainder", "contribution"].item()
    assert rem == pytest.approx(fr.attrs["removed_total"], abs=1e-10)
    assert abs(rem) > 1e-8


def test_bad_pairs_and_unsupported_models_raise():
    """Different variables, reversed origins and models without a linear form are refused."""
    y = simulated_panel(40, 3, seed=1)
    a = make_infoset(y, ["a", "b", "c"], origin="2001-01-05")
    b = make_infoset(y, ["a", "b", "d"], origin="2001-02-05")
    with pytest.raises(ValueError, match="same variables"):
        news_decomposition(BayesianVAR(), a, b, "a", 0)
    later = make_infoset(y, ["a", "b", "c"], origin="2001-02-05")
    with pytest.raises(ValueError, match="before info_old's"):
        news_decomposition(BayesianVAR(), later, a, "a", 0)
    with pytest.raises(TypeError, match=r"supported: \['bvar', 'dfm'\]"):
        news_decomposition(NoChange(), a, later, "a", 0)
