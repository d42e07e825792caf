"""The no-change benchmark: points, Gaussian and empirical densities from in-sample errors."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from harness.models.base import InsufficientDataError, ModelParameterError
from harness.models.nochange import NoChange
from harness.testing import make_infoset, make_targets


def _walk(n: int = 60, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal(n).cumsum() + 10


def test_random_walk_gaussian_scale_is_the_rms_of_h_step_changes():
    """Level draws are N(y_T, mean((y_{t+h} - y_t)^2)) with changes computed by pandas' diff."""
    y = _walk()
    info = make_infoset(y[:, None], ["lvl"])
    model = NoChange()
    out = model.forecast(info, make_targets(info, horizons=(0, 3)), 40_000, np.random.default_rng(0))
    for h in (0, 3):
        s = h + 1  # horizon 0 is one step after the last observation
        rms = np.sqrt((pd.Series(y).diff(s).dropna() ** 2).mean())  # pandas as reference
        np.testing.assert_allclose(model.scales_[("lvl", s)], rms, rtol=1e-12)
        draws = out.sel(horizon=h).values.ravel()
        assert stats.kstest(draws, stats.norm(y[-1], rms).cdf).pvalue > 1e-3


def test_drift_uses_the_sample_mean_change():
    """With mean='sample' the level point forecast is y_T + h * mean(diff(y))."""
    y = _walk() + 0.3 * np.arange(60)
    info = make_infoset(y[:, None], ["lvl"])
    out = NoChange(mean="sample", density="empirical").forecast(
        info, make_targets(info, horizons=(1,)), 20_000, np.random.default_rng(0))
    drift = np.diff(y).mean()
    errors = y[2:] - y[:-2] - 2 * drift
    point = y[-1] + 2 * drift
    # empirical draws are the point plus resampled in-sample errors, each error equally likely
    got = out.values.ravel() - point
    assert np.all(np.isin(np.round(got, 10), np.round(errors, 10)))
    assert abs(got.mean() - errors.mean()) < 4 * errors.std() / np.sqrt(20_000)


@pytest.mark.parametrize("mean", ["zero", "sample"])
def test_growth_rates_forecast_zero_or_the_sample_mean(mean):
    """For growth rates the point is 0 or the sample mean and the scale their in-sample RMS error."""
    y = np.random.default_rng(3).normal(2.0, 1.5, 80)
    info = make_infoset(y[:, None], ["g"])
    model = NoChange(level=False, mean=mean)
    out = model.forecast(info, make_targets(info, horizons=(0, 4)), 50_000, np.random.default_rng(1))
    point = y.mean() if mean == "sample" else 0.0
    scale = np.sqrt(np.mean((y - point) ** 2))
    for h in (0, 4):
        assert stats.kstest(out.sel(horizon=h).values.ravel(), stats.norm(point, scale).cdf).pvalue > 1e-3


def test_observed_targets_are_degenerate():
    """A backcast of an already observed period returns the observed value in every draw."""
    y = _walk()
    info = make_infoset(y[:, None], ["lvl"])
    out = NoChange().forecast(info, make_targets(info, horizons=(-3, -1, 0)), 50, np.random.default_rng(0))
    assert np.all(out.sel(horizon=-3).values == y[-3])
    assert np.all(out.sel(horizon=-1).values == y[-1])


def test_bad_parameters_list_the_valid_options():
    """An unknown density names the valid options, sorted."""
    info = make_infoset(_walk()[:, None], ["lvl"])
    with pytest.raises(ModelParameterError, match=r"\['empirical', 'gaussian'\]"):
        NoChange(density="kernel").forecast(info, make_targets(info), 5, np.random.default_rng(0))


def test_too_few_observations_for_the_horizon_raise():
    """Random-walk errors at step s need s + 2 observations, else InsufficientDataError."""
    info = make_infoset(_walk(5)[:, None], ["lvl"])
    with pytest.raises(InsufficientDataError, match="at least 6 observations, got 5"):
        NoChange().forecast(info, make_targets(info, horizons=(3,)), 5, np.random.default_rng(0))
