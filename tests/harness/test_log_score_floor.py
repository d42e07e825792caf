"""The log score's floor indicator (``log_score_floored``): which forecasts hit the cap, per cell.

Reference: scipy.stats.gaussian_kde (reference library) for the kernel density at the outcome,
with the bandwidth of Silverman (1986, eq. 3.31) as the log score uses it; the cap is
-log(1e-10) = 23.02585 nats.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from harness import scores as sc
from harness.scores import aggregate, resolve, score_all


def test_floored_flags_exactly_the_forecasts_whose_kde_density_is_below_the_floor():
    """Far outliers and zero-spread ensembles are flagged, ordinary forecasts are not; the flag
    equals 'scipy's KDE density at y is at most 1e-10' (Silverman bandwidth)."""
    rng = np.random.default_rng(0)
    x = rng.standard_normal((40, 300))
    y = rng.standard_normal(40)
    x[8] = 0.5  # zero spread: no density
    h = sc.silverman_bandwidth(x)
    # beyond the largest draw by 3..9 bandwidths: the density crosses 1e-10 near 6 bandwidths
    y[:8] = x[:8].max(axis=1) + np.linspace(3.0, 9.0, 8) * h[:8]
    y[9] = np.nan
    out = score_all(y, x)
    for i in range(40):
        if i == 9:
            assert np.isnan(out["log_score_floored"][i])
            continue
        if i == 8:
            want = True
        else:
            kde = stats.gaussian_kde(x[i], bw_method=h[i] / x[i].std(ddof=1))
            want = kde.logpdf(y[i])[0] <= math.log(1e-10) + 1e-9
        assert out["log_score_floored"][i] == float(want), i
        if want:
            assert out["log_score"][i] == -math.log(1e-10)
    assert 0 < out["log_score_floored"][:8].sum() < 8  # the grid straddles the floor


def test_floored_is_a_share_per_cell_not_a_loss():
    """Declared with no ratio and no tests; the cell mean is the share of floored forecasts (count = share x n)."""
    col = resolve("log_score_floored")
    assert col.score.versus is None and col.score.tests == () and not col.is_loss
    assert "log_score_floored" in resolve("log_score").score.reference
    frame = pd.DataFrame({"model": ["a"] * 4 + ["b"] * 4, "variable": "gdp", "horizon": 1,
                          "log_score": [1.0, 23.0, 2.0, 1.5, 1.0, 1.0, 1.0, 1.0],
                          "log_score_floored": [0.0, 1.0, 0.0, 1.0, 0.0, 0.0, 0.0, 0.0]})
    agg = aggregate(frame, score_columns=["log_score", "log_score_floored"]).set_index("model")
    assert agg.loc["a", "log_score_floored"] == 0.5 and agg.loc["a", "n"] == 4
    assert agg.loc["a", "log_score_floored"] * agg.loc["a", "n"] == 2
    rel = sc.relative_to(agg.reset_index(), "b")
    assert "log_score_floored" not in rel and "log_score_floored_diff" not in rel
