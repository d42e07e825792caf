"""Univariate autoregressions with an intercept, lag order by information criterion."""

from __future__ import annotations

import numpy as np

from harness.models.base import BaseModel, TargetLayout, register
from harness.models.params import Boolean, Interval, Options

__all__ = ["AutoRegression", "ar_design", "select_ar_order"]


def ar_design(y: np.ndarray, p: int, hold_back: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Regressand and regressors ``[1, y_{t-1}, ..., y_{t-p}]`` of an AR(p) with intercept.

    Parameters
    ----------
    y : ndarray (T,)
    p : int
        Lag order (0 gives the constant-only model).
    hold_back : int, optional
        Number of initial observations used only as lags (default ``p``). Setting it to the largest
        candidate order gives every candidate the same estimation sample.

    Returns
    -------
    yt : ndarray (T - hold_back,)
    x : ndarray (T - hold_back, p + 1)
    """
    hb = p if hold_back is None else hold_back
    t = len(y)
    cols = [np.ones(t - hb)] + [y[hb - lag:t - lag] for lag in range(1, p + 1)]
    return y[hb:], np.column_stack(cols)


def select_ar_order(y: np.ndarray, max_lags: int, ic: str = "bic") -> tuple[int, np.ndarray]:
    """Lag order minimising an information criterion, all candidates on one common sample.

    Candidates ``p = 0..max_lags`` are fitted by OLS on ``y[max_lags:]`` (the first ``max_lags``
    observations serve only as lags), with criteria

    * BIC: :math:`n \\log\\hat\\sigma^2 + (p + 2) \\log n`,
    * AIC: :math:`n \\log\\hat\\sigma^2 + 2 (p + 2)`,

    where :math:`\\hat\\sigma^2` is the ML residual variance and ``p + 2`` counts the intercept,
    the lags and the variance. These equal ``-2 llf + penalty`` up to a constant common to all
    candidates, which is the convention of statsmodels' ``ar_select_order`` (same sample for every
    order, ``df_model + 1`` parameters). Ties go to the smaller order.

    Parameters
    ----------
    y : ndarray (T,)
    max_lags : int
    ic : {"aic", "bic"}

    Returns
    -------
    order : int
    criteria : ndarray (max_lags + 1,)

    References
    ----------
    Schwarz, G. (1978). Estimating the dimension of a model. *Annals of Statistics* 6(2), 461-464.
    Akaike, H. (1974). A new look at the statistical model identification. *IEEE Transactions on
    Automatic Control* 19(6), 716-723.
    Lütkepohl, H. (2005). *New Introduction to Multiple Time Series Analysis*, Springer, ch. 4
    (order selection on a common sample).
    """
    yt, x_full = ar_design(y, max_lags)
    n = len(yt)
    crit = np.empty(max_lags + 1)
    for p in range(max_lags + 1):
        x = x_full[:, : p + 1]
        beta, *_ = np.linalg.lstsq(x, yt, rcond=None)
        resid = yt - x @ beta
        sigma2 = float(resid @ resid) / n
        penalty = np.log(n) if ic == "bic" else 2.0
        crit[p] = n * np.log(sigma2) + penalty * (p + 2)
    return int(np.argmin(crit)), crit


@register
class AutoRegression(BaseModel):
    """AR(p) with intercept per target variable, iterated multi-step predictive paths.

    The lag order is chosen per variable and per information set by ``ic`` over ``0..max_lags``
    on a common sample (see :func:`select_ar_order`); the chosen model is then re-estimated by
    OLS on all available observations (``T - p`` equations).

    With ``param_uncertainty=True`` each draw uses its own parameters from the posterior under
    the flat prior :math:`p(\\beta, \\sigma^2) \\propto 1/\\sigma^2`:
    :math:`\\sigma^2 \\mid y \\sim (T-k) s^2 / \\chi^2_{T-k}` (scaled inverse chi-square) and
    :math:`\\beta \\mid \\sigma^2, y \\sim N(\\hat\\beta, \\sigma^2 (X'X)^{-1})`. Otherwise every
    draw uses :math:`(\\hat\\beta, s^2)`, ``s^2 = SSR / (T - k)``. Future shocks are Gaussian.

    Parameters
    ----------
    max_lags : int, default 4
        Largest lag order considered (or the fixed order when ``ic`` is None).
    ic : {"bic", "aic"} or None, default "bic"
        Information criterion for the lag order; None fixes ``p = max_lags``.
    param_uncertainty : bool, default True
        Whether draws integrate over the parameter posterior.

    Notes
    -----
    Each variable uses the contiguous stretch of its own observations ending at its last
    observation. The largest candidate must leave at least 2 residual degrees of freedom on the
    common sample, i.e. ``T >= 2 * max_lags + 3``; otherwise :class:`InsufficientDataError`.
    Stationarity is not imposed.

    References
    ----------
    Zellner, A. (1971). *An Introduction to Bayesian Inference in Econometrics*, Wiley, ch. 3
    (normal linear regression under the diffuse prior).
    Schwarz, G. (1978). *Annals of Statistics* 6(2), 461-464.
    """

    name = "ar"
    version = "1"
    param_constraints = {
        "max_lags": [Interval(int, 0, 24)],
        "ic": [Options("aic", "bic"), None],
        "param_uncertainty": [Boolean()],
    }

    def __init__(self, max_lags: int = 4, ic: str | None = "bic", param_uncertainty: bool = True):
        self.max_lags = max_lags
        self.ic = ic
        self.param_uncertainty = param_uncertainty

    def fit_series(self, y: np.ndarray, name: str = "y") -> dict:
        """Order choice and OLS estimates for one series (the per-variable learned state)."""
        max_lags = int(self.validate()["max_lags"])
        needed = 2 * max_lags + 3
        if len(y) < needed:
            raise self._fail(f"variable {name!r} needs at least {needed} consecutive observations "
                             f"for max_lags={max_lags}, got {len(y)}")
        p = select_ar_order(y, max_lags, self.ic)[0] if self.ic is not None else max_lags
        yt, x = ar_design(y, p)
        q, r = np.linalg.qr(x)
        beta = np.linalg.solve(r, q.T @ yt)
        resid = yt - x @ beta
        dof = len(yt) - x.shape[1]
        return {"order": p, "coef": beta, "ssr": float(resid @ resid), "dof": dof,
                "sigma2": float(resid @ resid) / dof, "r": r, "last": y[len(y) - p:][::-1].copy()}

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        nv, nh = layout.observed.shape
        draws = np.zeros((layout.n_draws, nv, nh))
        runs, all_steps = layout.own_runs()
        fitted = [self.fit_series(layout.values[start:stop, col], name) for (start, stop), col, name
                  in zip(runs, layout.columns, layout.targets.variables, strict=True)]
        fits = {}
        for j, fit in enumerate(fitted):
            fits[layout.targets.variables[j]] = {k: v for k, v in fit.items()
                                                 if k in ("order", "coef", "sigma2", "dof")}
            steps = all_steps[j]
            horizon = int(steps.max())
            if horizon <= 0:
                continue
            paths = self._paths(fit, horizon, layout.n_draws, rng)
            live = steps > 0
            draws[:, j, live] = paths[:, steps[live] - 1]
        self.fits_ = fits
        return draws

    def _paths(self, fit: dict, horizon: int, n_draws: int, rng: np.random.Generator) -> np.ndarray:
        """Iterated paths ``(D, horizon)``, vectorised over draws."""
        p, beta, k = fit["order"], fit["coef"], len(fit["coef"])
        if self.param_uncertainty:
            sigma2 = fit["ssr"] / rng.chisquare(fit["dof"], size=n_draws)
            # beta | sigma2 ~ N(beta_hat, sigma2 (X'X)^-1) with (X'X)^-1 = R^-1 R^-T
            z = rng.standard_normal((n_draws, k))
            rinv = np.linalg.inv(fit["r"])
            betas = beta[None, :] + np.sqrt(sigma2)[:, None] * (z @ rinv.T)
        else:
            sigma2 = np.full(n_draws, fit["sigma2"])
            betas = np.broadcast_to(beta, (n_draws, k))
        sd = np.sqrt(sigma2)
        shocks = rng.standard_normal((n_draws, horizon)) * sd[:, None]
        lags = np.broadcast_to(fit["last"], (n_draws, p)).copy()  # newest first
        out = np.empty((n_draws, horizon))
        for t in range(horizon):
            y = betas[:, 0] + np.einsum("dl,dl->d", betas[:, 1:], lags) + shocks[:, t]
            out[:, t] = y
            if p:
                lags[:, 1:] = lags[:, :-1].copy()
                lags[:, 0] = y
        return out
