"""The fit/predict adapter: direct multi-step regressions, densities from out-of-sample errors."""

from __future__ import annotations

import numpy as np
import pytest

from harness.models import FitPredictModel, get_model_class, make_model
from harness.models.base import InsufficientDataError
from harness.testing import check_model, make_infoset, make_targets, simulated_panel


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
    model = FitPredictModel(LeastSquares(), lags=2, residuals="in_sample")
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


def test_cv_plus_draws_are_fold_predictions_plus_out_of_fold_errors():
    """CV+ draws are f_{-k}(x_T) + (y_t - f_{-k}(x_t)) over blocked folds with h-block buffers.

    Reference: numpy least squares per fold, with the buffers of Burman, Chow & Nolan (1994)
    and the CV+ construction of Barber, Candès, Ramdas & Tibshirani (2021), sec. 3.
    """
    y = _panel()
    info = make_infoset(y, ["a", "b"])
    lags, folds = 2, 5
    out = FitPredictModel(LeastSquares(), lags=lags, folds=folds).forecast(
        info, make_targets(info, ["a"], (0, 2)), 20_000, np.random.default_rng(0))
    for h in (0, 2):
        s = h + 1
        rows = np.arange(1, len(y) - s)
        x = np.column_stack([np.ones(len(rows)), y[rows], y[rows - 1]])
        target = y[rows + s, 0]
        x_new = np.concatenate([[1.0], y[-1], y[-2]])
        edges = np.linspace(0, len(rows), folds + 1).round().astype(int)
        values = []
        for lo, hi in zip(edges[:-1], edges[1:], strict=True):
            i = np.arange(len(rows))
            keep = (i < lo - (s - 1)) | (i >= hi + s + lags - 1)
            beta = np.linalg.lstsq(x[keep], target[keep], rcond=None)[0]
            values.append(x_new @ beta + target[lo:hi] - x[lo:hi] @ beta)
        values = np.concatenate(values)
        draws = out.sel(variable="a", horizon=h).values
        # every draw is one of the CV+ values, and each value is equally likely
        assert np.all(np.isin(np.round(draws, 8), np.round(values, 8)))
        assert abs(draws.mean() - values.mean()) < 4 * values.std() / np.sqrt(len(draws))


def test_adapter_passes_the_model_contract():
    """The adapter around a least-squares regressor passes every conformance check."""
    # the trend law's noise-free line makes the lagged features collinear: plain normal
    # equations are (numerically) singular there, a whisker of ridge is not
    for residuals in ("cv", "in_sample"):
        check_model(FitPredictModel(LeastSquares(ridge=1e-3), lags=2, residuals=residuals)
                    ).raise_if_failed()


def test_too_few_training_rows_raise():
    """Fewer training rows than twice the coefficients (features + intercept) raise InsufficientDataError."""
    info = make_infoset(_panel(t=8), ["a", "b"])
    with pytest.raises(InsufficientDataError, match="training rows"):
        FitPredictModel(LeastSquares(), lags=3).forecast(info, make_targets(info), 10,
                                                        np.random.default_rng(0))


def test_default_min_train_is_twice_the_coefficients():
    """With 2 variables and 2 lags (5 coefficients) 10 training rows suffice and 9 do not."""
    tg = lambda info: make_targets(info, ["a"], (0,))  # noqa: E731 - one step: T - lags rows
    ok = make_infoset(_panel(t=12), ["a", "b"])  # rows t = 1..10 with targets t + 1 <= 11
    model = FitPredictModel(LeastSquares(), lags=2, residuals="in_sample")
    model.forecast(ok, tg(ok), 5, np.random.default_rng(0))
    short = make_infoset(_panel(t=11), ["a", "b"])
    with pytest.raises(InsufficientDataError, match="needs at least 10 training rows, got 9"):
        model.forecast(short, tg(short), 5, np.random.default_rng(0))
    # cross-validation folds need their own rows: too few after the buffers is said so
    with pytest.raises(InsufficientDataError, match="a cross-validation fold leaves 3 training rows"):
        FitPredictModel(LeastSquares(), lags=2, folds=2).forecast(ok, tg(ok), 5,
                                                                  np.random.default_rng(0))


def _coverage(t: int, reps: int, residuals: str, steps=(1, 4), n_draws: int = 1000) -> dict:
    """Share of central 68 % and 90 % intervals covering the realised value, per step."""
    hits = {(s, lev): [] for s in steps for lev in (68, 90)}
    horizons = tuple(s - 1 for s in steps)  # horizon 0 is one step after the panel
    for r in range(reps):
        y = simulated_panel(t + max(steps), 3, seed=10_000 + r, ragged=False)
        info = make_infoset(y[:t], ["a", "b", "c"])
        out = FitPredictModel(LeastSquares(), lags=4, residuals=residuals).forecast(
            info, make_targets(info, horizons=horizons), n_draws, np.random.default_rng(r)).values
        for k, s in enumerate(steps):
            truth = y[t + s - 1]
            for lev in (68, 90):
                a = (1 - lev / 100) / 2
                lo, hi = np.quantile(out[:, :, k], [a, 1 - a], axis=0)
                hits[(s, lev)].extend(((truth >= lo) & (truth <= hi)).tolist())
    return {key: float(np.mean(v)) for key, v in hits.items()}


@pytest.mark.slow
def test_cv_intervals_cover_at_nominal_rates_on_a_simulated_var():
    """68 % and 90 % CV+ intervals cover within 3 points of nominal at 1 and 4 steps (T = 120).

    Monte Carlo on the simulated 3-variable VAR(1) of harness.testing (4 lags: 13 coefficients
    per regression); 800 replications x 3 variables, so a coverage rate has a Monte Carlo
    standard error of about 1 point (binomial, ignoring the correlation across variables). The
    in-sample residual bootstrap on the same replications falls short of 68 % by more than 3
    points: residuals of a fitted model are smaller than its prediction errors (common practice).
    """
    cv = _coverage(120, 800, "cv")
    assert all(abs(rate - lev / 100) <= 0.03 for (_, lev), rate in cv.items()), cv
    naive = _coverage(120, 300, "in_sample", steps=(1,))
    assert naive[(1, 68)] < 0.68 - 0.03 and naive[(1, 90)] < 0.90 - 0.02
