"""Transformations inside one vintage and monthly-to-quarterly conversion in levels."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from vintages import TRANSFORMS, build_infoset
from vintages.transforms import (
    apply_transform,
    months_to_quarters,
    register_transform,
    transform_names,
)


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


def test_register_transform_accepts_rowwise_and_refuses_cross_row(make_cube, gdp_rows):
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
    cube = make_cube(gdp_rows, {"gdp": {"freq": "Q"}})
    info = build_infoset(cube, "2010-07-30", {"gdp": "test_dlog2"})
    # vintage 2010-07-30: 2009Q4 = 101.2 (from 2010-05-30), 2010Q2 = 103.0: 100 ln(103.0/101.2)
    assert float(info.panel.sel(period="2010Q2", variable="gdp")) == pytest.approx(
        100 * math.log(103.0 / 101.2)
    )


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
