"""The fit/predict adapter: direct multi-step regressions with a residual bootstrap."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import FitPredictModel, get_model_class, make_model
from harness.models.base import InsufficientDataError
from harness.testing import check_model, make_infoset, make_targets


class LeastSquares:
    """A tiny duck-typed regressor: ordinary least squares with an intercept."""

    def __init__(self, ridge: float = 0.0):
        self.ridge = ridge

    def fit(self, x, y):
        x1 = np.column_stack([np.ones(len(x)), x])
        pen = self.ridge * np.eye(x1.shape[1])
        pen[0, 0] = 0.0
        self.coef_ = np.linalg.solve(x1.T @ x1 + pen, x1.T @ y)
        return self

    def predict(self, x):
        return np.column_stack([np.ones(len(x)), x]) @ self.coef_


def _panel(seed: int = 0, t: int = 80) -> np.ndarray:
    rng = np.random.default_rng(seed)
    y = np.zeros((t, 2))
    for s in range(1, t):
        y[s] = [0.5, 0.1] + np.array([[0.6, 0.2], [0.1, 0.4]]) @ y[s - 1] + rng.standard_normal(2)
    return y


def test_direct_regression_matches_numpy_least_squares():
    """The point forecast at step s is the OLS fit of y_{t+s} on [1, y_t, y_{t-1}] (numpy lstsq)."""
    y = _panel()
    info = make_infoset(y, ["a", "b"])
    model = FitPredictModel(LeastSquares(), lags=2)
    out = model.forecast(info, make_targets(info, ["a"], (0, 2)), 20_000, np.random.default_rng(0))
    for h in (0, 2):
        s = h + 1
        rows = np.arange(1, len(y) - s)
        x = np.column_stack([np.ones(len(rows)), y[rows], y[rows - 1]])
        beta, *_ = np.linalg.lstsq(x, y[rows + s, 0], rcond=None)
        resid = y[rows + s, 0] - x @ beta
        point = np.concatenate([[1.0], y[-1], y[-2]]) @ beta
        draws = out.sel(variable="a", horizon=h).values
        # residual bootstrap: draws are the point plus in-sample residuals, each equally likely
        assert np.all(np.isin(np.round(draws - point, 9), np.round(resid, 9)))
        assert abs((draws - point).mean() - resid.mean()) < 4 * resid.std() / np.sqrt(len(draws))


def test_the_wrapped_estimator_is_never_modified():
    """Fits happen on copies: the estimator passed in stays unfitted."""
    est = LeastSquares()
    info = make_infoset(_panel(), ["a", "b"])
    FitPredictModel(est, lags=1).forecast(info, make_targets(info), 10, np.random.default_rng(0))
    assert not hasattr(est, "coef_")


def test_params_describe_the_estimator_by_path_and_rebuild_it():
    """params() names the estimator class by path so make_model can rebuild the same model."""
    model = FitPredictModel(LeastSquares(ridge=0.5), lags=2)
    params = model.params()
    assert params["estimator"].endswith(":LeastSquares")
    assert params["estimator_params"] == {"ridge": 0.5}
    info = make_infoset(_panel(), ["a", "b"])
    tg = make_targets(info)
    twin = make_model("harness.models.adapter:FitPredictModel", **params)
    np.testing.assert_array_equal(twin.forecast(info, tg, 50, np.random.default_rng(3)).values,
                                  model.forecast(info, tg, 50, np.random.default_rng(3)).values)
    assert get_model_class("harness.models.adapter:FitPredictModel") is FitPredictModel


def test_adapter_passes_the_model_contract():
    """The adapter around a least-squares regressor passes every conformance check."""
    check_model(FitPredictModel(LeastSquares(), lags=2))


def test_too_few_training_rows_raise():
    """Fewer training rows than features + 2 raise InsufficientDataError."""
    info = make_infoset(_panel(t=8), ["a", "b"])
    with pytest.raises(InsufficientDataError, match="training rows"):
        FitPredictModel(LeastSquares(), lags=3).forecast(info, make_targets(info), 10,
                                                        np.random.default_rng(0))
