"""Wrap any ``fit(X, y)`` / ``predict(X)`` regressor as a direct multi-horizon forecasting model."""

from __future__ import annotations

import copy
import inspect
from typing import Any

import numpy as np

from harness.models.base import BaseModel, TargetLayout, _import_path, trailing_run
from harness.models.params import HasMethods, ImportPath, Interval, JSONTable

__all__ = ["FitPredictModel"]


def _estimator_spec(est: Any) -> tuple[str, dict]:
    """Import path and constructor parameters of an estimator object (scikit-learn conventions)."""
    cls = type(est)
    path = f"{cls.__module__}:{cls.__qualname__}"
    if hasattr(est, "get_params"):
        return path, dict(est.get_params(deep=False))
    sig = inspect.signature(cls.__init__)
    names = [p.name for p in sig.parameters.values()
             if p.name != "self" and p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)]
    return path, {k: getattr(est, k) for k in names if hasattr(est, k)}


class FitPredictModel(BaseModel):
    """Direct forecasts from a duck-typed regressor, densities by residual bootstrap.

    For each target variable ``v`` and each step ``s`` after the balanced block's last period
    ``T`` (the last period where every variable is observed), a fresh copy of ``estimator`` is
    fitted on

    .. math:: y_{v,t+s} = f(y_t, y_{t-1}, \\dots, y_{t-L+1}) + e_{t,s},

    with features the ``L = lags`` most recent values of *all* information-set variables
    (``n * L`` columns, newest first), using every ``t`` in the balanced block whose target
    ``y_{v,t+s}`` is observed (the target may lie in the ragged tail). The point forecast is
    ``f`` at the features of period ``T``; the draws add in-sample residuals ``e_{t,s}``
    resampled with replacement (a residual bootstrap).

    Parameters
    ----------
    estimator : object or str
        Anything with ``fit(X, y)`` returning the fitted object (or self) and ``predict(X)``;
        copied with :func:`copy.deepcopy` before each fit so it is never modified. A string
        ``"package.module:Class"`` is instantiated with ``estimator_params`` instead.
    lags : int, default 4
        Number of lags ``L`` of every variable in the features.
    estimator_params : dict, optional
        Constructor arguments when ``estimator`` is a path.
    min_train : int, optional
        Fewest training rows per fit; default ``n * L + 2`` (common practice for least squares:
        more rows than features). Fewer raise :class:`InsufficientDataError`.

    Notes
    -----
    ``params()`` describes an object estimator by its import path and its constructor parameters
    (``get_params(deep=False)`` if it has one, else same-named attributes, as in scikit-learn),
    so ``FitPredictModel(**model.params())`` rebuilds an equivalent model and a TOML spec can name
    the estimator by path.

    References
    ----------
    Marcellino, M., Stock, J. H. and Watson, M. W. (2006). A comparison of direct and iterated
    multistep AR methods for forecasting macroeconomic time series. *Journal of Econometrics*
    135(1-2), 499-526.
    Efron, B. and Tibshirani, R. J. (1993). *An Introduction to the Bootstrap*, Chapman & Hall,
    ch. 9 (bootstrapping regression residuals).
    """

    name = "fit_predict"
    version = "1"
    param_constraints = {
        "estimator": [ImportPath(), HasMethods("fit", "predict")],
        "lags": [Interval(int, 1, 24)],
        "estimator_params": [JSONTable(), None],
        "min_train": [Interval(int, 1, None), None],
    }

    def __init__(self, estimator: Any, lags: int = 4, estimator_params: dict | None = None,
                 min_train: int | None = None):
        self.estimator = estimator
        self.lags = lags
        self.estimator_params = estimator_params
        self.min_train = min_train

    def params(self) -> dict[str, Any]:
        """JSON-able description: the estimator as an import path plus its parameters."""
        if isinstance(self.estimator, str):
            path, est_params = self.estimator, dict(self.estimator_params or {})
        else:
            path, est_params = _estimator_spec(self.estimator)
        return {"estimator": path, "lags": self.lags, "estimator_params": est_params,
                "min_train": self.min_train}

    def _new_estimator(self) -> Any:
        if isinstance(self.estimator, str):
            cls = _import_path(self.estimator, what="estimator")
            return cls(**(self.estimator_params or {}))
        if self.estimator_params:
            raise self._bad_param("estimator_params", "empty when 'estimator' is an object "
                                  "(set its parameters on the object)", self.estimator_params)
        return copy.deepcopy(self.estimator)

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        lags = int(self.lags)
        lay = layout
        n_draws = lay.n_draws
        targets = lay.targets
        vals = lay.values
        start, stop = trailing_run(vals)
        n = vals.shape[1]
        min_train = n * lags + 2 if self.min_train is None else int(self.min_train)
        if stop - start < lags:
            raise self._fail(f"the balanced sample needs at least lags = {lags} periods to build "
                             f"features, got {stop - start}")
        # feature row for period t: [y_t, y_{t-1}, ..., y_{t-L+1}] (all variables), t in block
        rows = np.arange(start + lags - 1, stop)
        feats = np.concatenate([vals[rows - lag] for lag in range(lags)], axis=1)
        steps = lay.steps(lay.ordinals[stop - 1])
        draws = np.zeros((n_draws, *steps.shape))
        fitted = {}
        for j, col in enumerate(lay.columns):
            for k in np.flatnonzero(steps[j] > 0):
                s = int(steps[j, k])
                tgt_rows = rows + s
                ok = tgt_rows < len(vals)
                y = np.full(len(rows), np.nan)
                y[ok] = vals[tgt_rows[ok], col]
                train = np.isfinite(y)
                if train.sum() < min_train:
                    raise self._fail(f"variable {targets.variables[j]!r}, step {s}: needs at least "
                                     f"{min_train} training rows, got {int(train.sum())}")
                est = self._new_estimator()
                fit_result = est.fit(feats[train], y[train])
                est = est if fit_result is None else fit_result
                resid = y[train] - np.asarray(est.predict(feats[train]), dtype=float).ravel()
                point = float(np.asarray(est.predict(feats[-1:]), dtype=float).ravel()[0])
                draws[:, j, k] = point + resid[rng.integers(0, len(resid), size=n_draws)]
                fitted[(targets.variables[j], s)] = est
        self.estimators_ = fitted
        return draws
