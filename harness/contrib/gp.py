"""Gaussian-process autoregression: exact GP regression of each series on its own lags.

For each target variable the model regresses ``y_t`` on its own ``p`` lags
``x_t = (y_{t-1}, ..., y_{t-p})`` with a Gaussian-process prior on the regression function,

.. math:: y_t = f(x_t) + \\varepsilon_t, \\quad f \\sim GP(0, k), \\quad
          \\varepsilon_t \\sim N(0, \\sigma_n^2),

on the series standardised by its own mean and standard deviation. The covariance is a
stationary kernel for nonlinear dynamics plus, by default, a linear (dot-product) kernel that
makes the model contain a Bayesian linear AR(p) with intercept:

.. math:: k(x, x') = \\sigma_f^2\\, \\kappa(\\lVert x - x' \\rVert / \\ell)
          + c\\,(1 + x^\\top x'),

with :math:`\\kappa` the squared exponential :math:`\\exp(-r^2/2)` or the Matérn 5/2
:math:`(1 + \\sqrt5 r + 5r^2/3)\\exp(-\\sqrt5 r)`. Without the linear part a stationary kernel
reverts to the mean outside the data, so a trending series would be forecast back to its
average. The hyperparameters :math:`(\\sigma_f^2, \\ell, c, \\sigma_n^2)` maximise the log
marginal likelihood (type-II maximum likelihood) by L-BFGS-B in log space with analytic
gradients, from a fixed start and ``restarts`` further fixed starts (no randomness: the fit is a
function of the data). The estimates are plugged in (hyperparameter uncertainty is not
integrated over).

Multi-step draws are iterated by simulation: each draw's path takes its next value from the
one-step predictive distribution :math:`N(\\bar f(x), \\mathbb V f(x) + \\sigma_n^2)` at its own
simulated lags, so the input uncertainty propagates through the nonlinearity (the Monte Carlo
approach of Girard et al. 2003). The function's values at different steps of a path are drawn
independently given the training data, an approximation that ignores their posterior
correlation; the one-step predictive itself is exact.

This module is the worked example of ``docs/model_template.py``: a user model reached by path
(``type = "harness.contrib.gp:GaussianProcessAR"``), not registered under a short name.

References
----------
Rasmussen, C. E. and Williams, C. K. I. (2006). *Gaussian Processes for Machine Learning*, MIT
Press: ch. 2 (predictive distribution, Algorithm 2.1; log marginal likelihood, eq. 2.30),
ch. 4 (squared-exponential, Matérn and dot-product covariances), ch. 5 (derivatives of the
marginal likelihood, eq. 5.9).
Girard, A., Rasmussen, C. E., Quiñonero-Candela, J. and Murray-Smith, R. (2003). Gaussian
process priors with uncertain inputs: application to multiple-step ahead time series
forecasting. *Advances in Neural Information Processing Systems* 15, 545-552.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from harness.models.base import BaseModel, TargetLayout
from harness.models.params import Boolean, Interval, Options

__all__ = ["KERNELS", "GaussianProcessAR", "GPFit", "fit_gp", "gp_log_marginal_likelihood",
           "kernel_matrix"]

KERNELS: tuple[str, ...] = ("matern52", "squared_exponential")

# Bounds of the hyperparameters (standardised data: the series has variance 1).
_BOUNDS = {"signal_var": (1e-6, 1e3), "length_scale": (1e-1, 1e3), "linear_var": (1e-6, 1e3),
           "noise_var": (1e-8, 10.0)}
# Fixed starting points (signal_var, length_scale, linear_var, noise_var); the first is the
# default, the others are used in turn as restarts.
_STARTS = ((1.0, 1.0, 1.0, 0.1), (1.0, 3.0, 0.1, 0.5), (0.3, 0.3, 1.0, 0.01),
           (0.1, 10.0, 1.0, 0.2), (1.0, 0.1, 0.01, 0.05))
# Fewest input-output pairs to estimate on (a handful per hyperparameter: common practice).
MIN_TRAIN = 10


def _names(linear: bool) -> list[str]:
    return ["signal_var", "length_scale"] + (["linear_var"] if linear else []) + ["noise_var"]


def _sqdist(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    d = (a * a).sum(1)[:, None] + (b * b).sum(1)[None, :] - 2.0 * a @ b.T
    return np.maximum(d, 0.0)


def kernel_matrix(a: np.ndarray, b: np.ndarray, hyper: dict[str, float], kernel: str,
                  linear: bool) -> np.ndarray:
    """The covariance ``k(a_i, b_j)`` without the noise term.

    Parameters
    ----------
    a : ndarray (n1, p)
    b : ndarray (n2, p)
    hyper : dict
        ``signal_var``, ``length_scale``, ``noise_var`` and, with ``linear``, ``linear_var``.
    kernel : {"squared_exponential", "matern52"}
    linear : bool
        Add the dot-product part ``linear_var * (1 + a b')``.

    Returns
    -------
    ndarray (n1, n2)
    """
    return _kernel_parts(a, b, hyper, kernel, linear)[0]


def _kernel_parts(a, b, hyper, kernel, linear):
    """``(K, K_stationary, K_linear, d K_stationary / d log length_scale)``."""
    r2 = _sqdist(a, b) / hyper["length_scale"] ** 2
    sf2 = hyper["signal_var"]
    if kernel == "squared_exponential":
        ks = sf2 * np.exp(-0.5 * r2)
        dell = ks * r2
    else:
        s = np.sqrt(5.0 * r2)
        e = np.exp(-s)
        ks = sf2 * (1.0 + s + s * s / 3.0) * e
        dell = sf2 * e * s * s * (1.0 + s) / 3.0
    kl = hyper["linear_var"] * (1.0 + a @ b.T) if linear else None
    return (ks if kl is None else ks + kl), ks, kl, dell


def _hyper(theta: np.ndarray, linear: bool) -> dict[str, float]:
    return dict(zip(_names(linear), np.exp(theta).tolist(), strict=True))


def gp_log_marginal_likelihood(theta: np.ndarray, x: np.ndarray, y: np.ndarray, kernel: str,
                               linear: bool) -> tuple[float, np.ndarray]:
    """Log marginal likelihood and its gradient in the log-hyperparameters.

    ``log p(y | X) = -y' alpha / 2 - sum_i log L_ii - (n/2) log 2 pi`` with
    ``K + sigma_n^2 I = L L'``, ``alpha = (K + sigma_n^2 I)^{-1} y`` (Rasmussen & Williams 2006,
    Algorithm 2.1, eq. 2.30); ``d/d theta_j = tr((alpha alpha' - K^{-1}) dK/d theta_j) / 2``
    (eq. 5.9). ``theta`` is the log of the hyperparameters in the order
    ``signal_var, length_scale, [linear_var,] noise_var``. A covariance that is not positive
    definite gives ``-inf`` and a zero gradient.
    """
    from scipy.linalg import cho_solve, cholesky

    hyper = _hyper(theta, linear)
    k, ks, kl, dell = _kernel_parts(x, x, hyper, kernel, linear)
    n = len(y)
    kn = k + hyper["noise_var"] * np.eye(n)
    try:
        chol = cholesky(kn, lower=True, check_finite=False)
    except np.linalg.LinAlgError:
        return -np.inf, np.zeros_like(theta)
    alpha = cho_solve((chol, True), y, check_finite=False)
    lml = -0.5 * float(y @ alpha) - float(np.log(np.diag(chol)).sum()) - 0.5 * n * np.log(2 * np.pi)
    inner = np.outer(alpha, alpha) - cho_solve((chol, True), np.eye(n), check_finite=False)
    derivs = [ks, dell] + ([kl] if linear else []) + [hyper["noise_var"] * np.eye(n)]
    grad = np.array([0.5 * float((inner * d).sum()) for d in derivs])
    return lml, grad


@dataclass(frozen=True)
class GPFit:
    """A fitted GP regression (on whatever scale ``x`` and ``y`` were given).

    Attributes
    ----------
    x : ndarray (n, p)
    hyper : dict
        The hyperparameters.
    kernel : str
    linear : bool
    chol : ndarray (n, n)
        Lower Cholesky factor of ``K + noise_var I``.
    alpha : ndarray (n,)
        ``(K + noise_var I)^{-1} y``.
    log_marginal_likelihood : float
    """

    x: np.ndarray
    hyper: dict
    kernel: str
    linear: bool
    chol: np.ndarray
    alpha: np.ndarray
    log_marginal_likelihood: float

    def predict(self, xs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Predictive mean and variance of a new *observation* ``y* = f(x*) + noise`` at ``xs``.

        Rasmussen & Williams (2006), Algorithm 2.1 (the noise variance added to the latent
        variance).

        Parameters
        ----------
        xs : ndarray (m, p)

        Returns
        -------
        mean, variance : ndarray (m,)
        """
        from scipy.linalg import solve_triangular

        kx = kernel_matrix(xs, self.x, self.hyper, self.kernel, self.linear)
        mean = kx @ self.alpha
        v = solve_triangular(self.chol, kx.T, lower=True, check_finite=False)
        prior = np.full(len(xs), self.hyper["signal_var"])
        if self.linear:
            prior = prior + self.hyper["linear_var"] * (1.0 + (xs * xs).sum(1))
        latent = np.maximum(prior - (v * v).sum(0), 0.0)
        return mean, latent + self.hyper["noise_var"]


def fit_gp(x: np.ndarray, y: np.ndarray, *, kernel: str = "squared_exponential",
           linear: bool = True, restarts: int = 1, hyper: dict | None = None) -> GPFit:
    """Exact GP regression; hyperparameters by maximum marginal likelihood unless given.

    Parameters
    ----------
    x : ndarray (n, p)
    y : ndarray (n,)
    kernel : {"squared_exponential", "matern52"}
    linear : bool
        Add the dot-product kernel (see the module docstring).
    restarts : int
        Further fixed starting points of the optimiser (0 to 4); the best optimum is kept.
    hyper : dict, optional
        Fixed hyperparameters (no optimisation).

    Returns
    -------
    GPFit
    """
    from scipy.linalg import cho_solve, cholesky
    from threadpoolctl import threadpool_limits

    names = _names(linear)
    if hyper is None:
        # matrices of a few hundred rows: BLAS threads only add overhead, and contention when
        # several workers share the cores (the runner limits its workers the same way)
        with threadpool_limits(limits=1, user_api="blas"):
            hyper = _maximise(x, y, kernel, linear, restarts, names)
    theta = np.log([hyper[k] for k in names])
    k = kernel_matrix(x, x, hyper, kernel, linear) + hyper["noise_var"] * np.eye(len(y))
    chol = cholesky(k, lower=True)
    alpha = cho_solve((chol, True), y)
    lml = gp_log_marginal_likelihood(theta, x, y, kernel, linear)[0]
    return GPFit(x, dict(hyper), kernel, linear, chol, alpha, float(lml))


def _maximise(x: np.ndarray, y: np.ndarray, kernel: str, linear: bool, restarts: int,
              names: list[str]) -> dict[str, float]:
    """Hyperparameters maximising the log marginal likelihood, best over the fixed starts."""
    from scipy.optimize import minimize

    def neg(theta):
        lml, grad = gp_log_marginal_likelihood(theta, x, y, kernel, linear)
        # a non-positive-definite covariance: a large finite value keeps L-BFGS-B stepping back
        return (1e25, np.zeros_like(theta)) if not np.isfinite(lml) else (-lml, -grad)

    bounds = np.log([_BOUNDS[k] for k in names])
    best = None
    for start in _STARTS[: 1 + int(restarts)]:
        s = dict(zip(("signal_var", "length_scale", "linear_var", "noise_var"), start, strict=True))
        res = minimize(neg, np.log([s[k] for k in names]), jac=True, method="L-BFGS-B",
                       bounds=bounds)
        if best is None or res.fun < best.fun:
            best = res
    return _hyper(best.x, linear)


def _lag_matrix(z: np.ndarray, p: int) -> tuple[np.ndarray, np.ndarray]:
    """Inputs ``(z_{t-1}, ..., z_{t-p})`` and outputs ``z_t`` for ``t = p..T-1``."""
    t = len(z)
    x = np.column_stack([z[p - lag:t - lag] for lag in range(1, p + 1)])
    return x, z[p:]


class GaussianProcessAR(BaseModel):
    """Gaussian-process autoregression per target variable; see the module docstring.

    Parameters
    ----------
    lags : int, default 2
        Number of own lags ``p`` in the inputs.
    kernel : {"squared_exponential", "matern52"}, default "squared_exponential"
        The stationary part of the covariance.
    linear : bool, default True
        Add the dot-product kernel (a Bayesian linear AR(p) with intercept inside the GP).
    restarts : int, default 1
        Further fixed starts of the marginal-likelihood optimiser (0 to 4).

    Notes
    -----
    Each target variable uses the contiguous stretch of its own observations that ends at its
    last observation, standardised by its mean and standard deviation; steps are counted from
    there (the ragged edge is handled per variable, as in ``ar``). At least ``lags + 10``
    observations are needed (10 input-output pairs), else :class:`InsufficientDataError`.
    The cost is cubic in the number of observations per variable and forecast.

    Attributes
    ----------
    fits_ : dict
        Per target variable: ``hyper`` (the hyperparameters), ``log_marginal_likelihood``,
        ``n_train``, ``mean`` and ``scale`` (of the standardisation), after a forecast.
    """

    name = "gp_ar"
    version = "1"
    param_constraints = {
        "lags": [Interval(int, 1, 12)],
        "kernel": [Options(*KERNELS)],
        "linear": [Boolean()],
        "restarts": [Interval(int, 0, len(_STARTS) - 1)],
    }

    def __init__(self, *, lags: int = 2, kernel: str = "squared_exponential", linear: bool = True,
                 restarts: int = 1):
        self.lags = lags
        self.kernel = kernel
        self.linear = linear
        self.restarts = restarts

    def fit_series(self, y: np.ndarray, name: str = "y") -> tuple[GPFit, float, float]:
        """The GP fit of one series (standardised), its mean and scale."""
        params = self.validate()
        p = params["lags"]
        if len(y) < p + MIN_TRAIN:
            raise self._fail(f"variable {name!r} needs at least lags + {MIN_TRAIN} = "
                             f"{p + MIN_TRAIN} consecutive observations, got {len(y)}")
        mean = float(np.mean(y))
        scale = float(np.std(y))
        # a constant series has no scale: keep its units (the GP then predicts the constant)
        scale = scale if scale > 1e-12 * max(1.0, abs(mean)) else 1.0
        x, target = _lag_matrix((y - mean) / scale, p)
        fit = fit_gp(x, target, kernel=params["kernel"], linear=params["linear"],
                     restarts=params["restarts"])
        return fit, mean, scale

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        from threadpoolctl import threadpool_limits

        # as in fit_gp: small matrices, one BLAS thread
        with threadpool_limits(limits=1, user_api="blas"):
            return self._draw(layout, rng)

    def _draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        p = int(self.validate()["lags"])
        nv, nh = layout.observed.shape
        d = layout.n_draws
        draws = np.zeros((d, nv, nh))
        runs, all_steps = layout.own_runs()
        fits = {}
        for j, ((start, stop), col, name) in enumerate(zip(runs, layout.columns,
                                                           layout.targets.variables, strict=True)):
            y = layout.values[start:stop, col]
            fit, mean, scale = self.fit_series(y, name)
            fits[name] = {"hyper": fit.hyper, "log_marginal_likelihood": fit.log_marginal_likelihood,
                          "n_train": len(fit.alpha), "mean": mean, "scale": scale}
            steps = all_steps[j]
            horizon = int(steps.max())
            if horizon <= 0:
                continue
            lags = np.broadcast_to(((y[len(y) - p:] - mean) / scale)[::-1], (d, p)).copy()
            path = np.empty((d, horizon))
            for t in range(horizon):
                m, v = fit.predict(lags)
                z = m + np.sqrt(v) * rng.standard_normal(d)
                path[:, t] = z
                lags[:, 1:] = lags[:, :-1].copy()
                lags[:, 0] = z
            live = steps > 0
            draws[:, j, live] = mean + scale * path[:, steps[live] - 1]
        self.fits_ = fits
        return draws
