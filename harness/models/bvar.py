"""Bayesian VAR with a conjugate Minnesota-type prior (Normal-inverse-Wishart, dummy observations).

The prior of Litterman (1986) in the conjugate Normal-inverse-Wishart form of Kadiyala &
Karlsson (1997), implemented by dummy observations (Sims & Zha 1998) in the layout of Bańbura,
Giannone & Reichlin (2010). Appending the dummies ``(Y_d, X_d)`` to the data
``(Y, X)`` gives the posterior in closed form:

.. math::

    \\tilde B = (X_*'X_*)^{-1} X_*'Y_*, \\quad
    \\tilde S = (Y_* - X_*\\tilde B)'(Y_* - X_*\\tilde B), \\quad
    \\Sigma \\mid Y \\sim IW(\\tilde S, \\nu),\\ \\nu = T + T_d + 2 - k, \\quad
    \\operatorname{vec} B \\mid \\Sigma, Y \\sim N(\\operatorname{vec}\\tilde B, \\Sigma \\otimes (X_*'X_*)^{-1}).

Draws are exact and vectorised over draws: ``Sigma`` by a batched Bartlett decomposition,
``B | Sigma`` by one product with the Cholesky factor of :math:`(X_*'X_*)^{-1}`.

References
----------
Litterman, R. B. (1986). Forecasting with Bayesian vector autoregressions: five years of
experience. *Journal of Business & Economic Statistics* 4(1), 25-38.
Kadiyala, K. R. and Karlsson, S. (1997). Numerical methods for estimation and inference in
Bayesian VAR-models. *Journal of Applied Econometrics* 12(2), 99-132.
Sims, C. A. and Zha, T. (1998). Bayesian methods for dynamic multivariate models.
*International Economic Review* 39(4), 949-968.
Bańbura, M., Giannone, D. and Reichlin, L. (2010). Large Bayesian vector auto regressions.
*Journal of Applied Econometrics* 25(1), 71-92.
Bartlett, M. S. (1933). On the theory of statistical regression. *Proceedings of the Royal
Society of Edinburgh* 53, 260-283 (the Bartlett decomposition of a Wishart matrix).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from harness.models.base import (
    BaseModel,
    TargetLayout,
    ar1_scales,
    lag_design,
    per_variable,
    register,
    trailing_run,
)
from harness.models.conditional import var_paths
from harness.models.errors import ModelParameterError
from harness.models.params import Interval, Options, PerVariable

__all__ = [
    "HYPERPARAMETERS",
    "BayesianVAR",
    "HyperparameterChoice",
    "NIWPosterior",
    "choose_hyperparameters",
    "gamma_log_density",
    "log_marginal_likelihood",
    "minnesota_dummies",
    "niw_posterior",
    "sample_inverse_wishart",
]

# Prior precision of the intercept (BGR 2010's epsilon): small, i.e. a nearly flat prior.
_CONST_PRECISION = 1e-5


def minnesota_dummies(y: np.ndarray, lags: int, tightness: float, lag_decay: float,
                      prior_mean: np.ndarray, scales: np.ndarray,
                      sum_of_coefficients: float | None = None,
                      co_persistence: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Dummy observations of the conjugate Minnesota-type prior.

    Row blocks (layout of BGR 2010; Sims & Zha 1998 for the co-persistence row):

    * lags ``l = 1..p``: ``Y_d = diag(m_i s_i)/lambda`` for ``l = 1`` (zero otherwise),
      ``X_d = l^{d} diag(s_i)/lambda`` in the block of lag ``l``: prior mean ``m_i`` on the own
      first lag, prior s.d. ``(lambda / l^d) * sigma_i / s_j`` for the coefficient on lag ``l`` of
      variable ``j`` in equation ``i`` (with ``Sigma_ii ~ s_i^2``);
    * ``diag(s_i)`` with zero regressors: the prior scale of ``Sigma``;
    * the intercept row ``(0, ..., 0, eps)``: a nearly flat prior on the constant;
    * sum of coefficients (if ``mu`` given): ``Y_d = diag(m_i ybar_i)/mu``,
      ``X_d = (1_p' (x) diag(m_i ybar_i))/mu``; inactive for variables with ``m_i = 0``, as in
      BGR: their rows would be all zero, so they are left out (an all-zero dummy row changes
      no coefficient but would add one to the degrees of freedom of ``Sigma``'s prior);
    * co-persistence (if ``delta`` given): ``Y_d = ybar'/delta``, ``X_d = ((1_p' (x) ybar'), 1)/delta``.

    ``ybar`` is the mean of the first ``p`` observations. Smaller ``lambda``, ``mu``, ``delta``
    mean tighter priors; ``None`` switches a block off.

    Parameters
    ----------
    y : ndarray (T, n)
        The estimation sample (used only for ``ybar``).
    lags, tightness, lag_decay : int, float, float
        ``p``, ``lambda``, ``d``.
    prior_mean : ndarray (n,)
        Prior mean ``m_i`` of each own first-lag coefficient.
    scales : ndarray (n,)
        Residual scales ``s_i`` (AR(1) residual standard deviations).
    sum_of_coefficients, co_persistence : float or None
        ``mu`` and ``delta``.

    Returns
    -------
    y_d : ndarray (T_d, n)
    x_d : ndarray (T_d, n * p + 1)

    References
    ----------
    Bańbura, Giannone & Reichlin (2010), *Journal of Applied Econometrics* 25(1), 71-92.
    Sims & Zha (1998), *International Economic Review* 39(4), 949-968.
    Doan, T., Litterman, R. and Sims, C. (1984). Forecasting and conditional projection using
    realistic prior distributions. *Econometric Reviews* 3(1), 1-100.
    """
    n = y.shape[1]
    k = n * lags + 1
    rows_y, rows_x = [], []
    decay = np.arange(1, lags + 1, dtype=float) ** lag_decay
    yd = np.zeros((n * lags, n))
    yd[:n] = np.diag(prior_mean * scales) / tightness
    xd = np.zeros((n * lags, k))
    xd[:, : n * lags] = np.kron(np.diag(decay), np.diag(scales)) / tightness
    rows_y += [yd, np.diag(scales), np.zeros((1, n))]
    const = np.zeros((1, k))
    const[0, -1] = _CONST_PRECISION
    rows_x += [xd, np.zeros((n, k)), const]
    ybar = y[:lags].mean(axis=0)
    if sum_of_coefficients is not None:
        d = np.diag(prior_mean * ybar) / sum_of_coefficients
        d = d[prior_mean * ybar != 0]  # rows of variables with m_i = 0 are all zero: inactive
        rows_y.append(d)
        rows_x.append(np.concatenate([np.tile(d, (1, lags)), np.zeros((len(d), 1))], axis=1))
    if co_persistence is not None:
        rows_y.append(ybar[None, :] / co_persistence)
        rows_x.append(np.concatenate([np.tile(ybar, lags), [1.0]])[None, :] / co_persistence)
    return np.concatenate(rows_y), np.concatenate(rows_x)


@dataclass(frozen=True)
class NIWPosterior:
    """Normal-inverse-Wishart posterior of a VAR: ``Sigma ~ IW(scale, dof)``, ``B | Sigma ~ MN``.

    Attributes
    ----------
    coef_mean : ndarray (k, n)
        ``B~``; rows ``[lag 1 (n), ..., lag p (n), intercept]``.
    omega_factor : ndarray (k, k)
        ``P`` with ``P P' = Omega = (X*'X*)^{-1}`` (upper triangular).
    scale : ndarray (n, n)
        ``S~``.
    dof : float
        ``nu``.
    """

    coef_mean: np.ndarray
    omega_factor: np.ndarray
    scale: np.ndarray
    dof: float

    @property
    def omega(self) -> np.ndarray:
        return self.omega_factor @ self.omega_factor.T

    @property
    def lags(self) -> int:
        return (self.coef_mean.shape[0] - 1) // self.coef_mean.shape[1]

    def mean_sigma(self) -> np.ndarray:
        """``E[Sigma | Y] = S~ / (nu - n - 1)`` (requires ``nu > n + 1``)."""
        n = self.scale.shape[0]
        return self.scale / (self.dof - n - 1)

    def sample(self, n_draws: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """Exact posterior draws.

        Returns
        -------
        coefs : ndarray (D, k, n)
        factors : ndarray (D, n, n)
            ``F`` with ``F F' = Sigma`` for each draw.
        """
        k, n = self.coef_mean.shape
        f = sample_inverse_wishart(self.scale, self.dof, n_draws, rng)
        # B = B~ + P Z F' has vec(B) ~ N(vec B~, (F F') (x) (P P')) = N(., Sigma (x) Omega).
        # Built transposed, B' = B~' + F Z' P': one batched n x n product, then one BLAS call
        # with the common P; the result is returned as a (D, k, n) view of a (D, n, k) array.
        zt = rng.standard_normal((n_draws, n, k))
        bt = (f @ zt).reshape(n_draws * n, k) @ self.omega_factor.T
        bt = bt.reshape(n_draws, n, k)
        bt += self.coef_mean.T[None]
        return np.swapaxes(bt, 1, 2), f


def _tril_inverse(a: np.ndarray) -> np.ndarray:
    """Inverses of a stack of lower-triangular matrices ``(D, n, n)`` by forward substitution."""
    d, n, _ = a.shape
    x = np.zeros_like(a)
    for i in range(n):
        rhs = -np.einsum("dj,djk->dk", a[:, i, :i], x[:, :i, :])
        rhs[:, i] += 1.0
        x[:, i, :] = rhs / a[:, i, i, None]
    return x


def sample_inverse_wishart(scale: np.ndarray, dof: float, n_draws: int,
                           rng: np.random.Generator) -> np.ndarray:
    """Square-root factors of inverse-Wishart draws by a batched Bartlett decomposition.

    If ``S = L L'`` and ``A`` is the Bartlett factor of a ``W(I, nu)`` draw (lower triangular,
    ``A_ii^2 ~ chi^2_{nu - i + 1}``, ``A_ij ~ N(0, 1)`` below the diagonal), then
    ``W = L^{-T} A A' L^{-1} ~ Wishart(S^{-1}, nu)`` and ``Sigma = W^{-1} = F F'`` with
    ``F = L A^{-T}``, so ``Sigma ~ IW(S, nu)`` (density proportional to
    ``|Sigma|^{-(nu+n+1)/2} exp(-tr(S Sigma^{-1})/2)``, mean ``S/(nu - n - 1)``).

    Parameters
    ----------
    scale : ndarray (n, n)
        ``S``, symmetric positive definite.
    dof : float
        ``nu > n - 1``.
    n_draws : int
    rng : numpy.random.Generator

    Returns
    -------
    ndarray (D, n, n)
        ``F`` per draw (``Sigma = F F'``).

    References
    ----------
    Bartlett (1933), *Proc. Royal Society of Edinburgh* 53, 260-283; Anderson, T. W. (2003).
    *An Introduction to Multivariate Statistical Analysis*, 3rd ed., Wiley, ch. 7 (the Wishart distribution).
    """
    n = scale.shape[0]
    if dof <= n - 1:
        raise ValueError(f"inverse-Wishart degrees of freedom must exceed n - 1 = {n - 1}, got {dof}")
    chol = np.linalg.cholesky(scale)
    a = np.zeros((n_draws, n, n))
    idx = np.arange(n)
    a[:, idx, idx] = np.sqrt(rng.chisquare(dof - idx, size=(n_draws, n)))
    lo = np.tril_indices(n, -1)
    a[:, lo[0], lo[1]] = rng.standard_normal((n_draws, len(lo[0])))
    return chol @ np.swapaxes(_tril_inverse(a), 1, 2)


def niw_posterior(y: np.ndarray, lags: int, y_d: np.ndarray, x_d: np.ndarray) -> NIWPosterior:
    """Conjugate posterior from data plus dummy observations (stacked least squares by QR).

    Parameters
    ----------
    y : ndarray (T, n)
        The balanced estimation sample (the first ``lags`` rows are initial conditions).
    lags : int
    y_d, x_d : ndarray
        Dummy observations (see :func:`minnesota_dummies`).

    Returns
    -------
    NIWPosterior
        With ``nu = (T - p) + T_d + 2 - k``: the dummy prior combined with
        ``p(Sigma) ~ |Sigma|^{-(n+3)/2}`` as in BGR (2010) ("from memory").

    References
    ----------
    Kadiyala & Karlsson (1997), *Journal of Applied Econometrics* 12(2), 99-132.
    Bańbura, Giannone & Reichlin (2010), *Journal of Applied Econometrics* 25(1), 71-92.
    """
    yt, x = lag_design(y, lags)
    ys = np.concatenate([yt, y_d])
    xs = np.concatenate([x, x_d])
    q, r = np.linalg.qr(xs)
    coef = np.linalg.solve(r, q.T @ ys)
    resid = ys - xs @ coef
    scale = resid.T @ resid
    scale = 0.5 * (scale + scale.T)
    k = xs.shape[1]
    dof = float(len(yt) + len(y_d) + 2 - k)
    # (X*'X*)^{-1} = R^{-1} R^{-T}: R^{-1} is an exact square root, no second factorisation
    return NIWPosterior(coef, np.linalg.inv(r), scale, dof)


def log_marginal_likelihood(y: np.ndarray, lags: int, y_d: np.ndarray, x_d: np.ndarray) -> float:
    """Closed-form log marginal likelihood of the conjugate NIW VAR with a dummy-observation prior.

    The dummies ``(Y_d, X_d)`` with ``p(Sigma) ~ |Sigma|^{-(n+3)/2}`` imply the proper prior
    ``Sigma ~ IW(S_0, nu_0)``, ``vec B | Sigma ~ N(vec B_0, Sigma (x) Omega_0)`` with
    ``Omega_0 = (X_d'X_d)^{-1}``, ``B_0 = Omega_0 X_d'Y_d``,
    ``S_0 = (Y_d - X_d B_0)'(Y_d - X_d B_0)`` and ``nu_0 = T_d + 2 - k`` (the prior of
    :func:`niw_posterior`). Conditional on the first ``p`` observations,

    .. math::

        \\log p(Y) = -\\tfrac{nT}{2}\\log\\pi
          + \\log\\Gamma_n(\\tfrac{\\nu_0 + T}{2}) - \\log\\Gamma_n(\\tfrac{\\nu_0}{2})
          + \\tfrac{n}{2}(\\log|X_d'X_d| - \\log|X_*'X_*|)
          + \\tfrac{\\nu_0}{2}\\log|S_0| - \\tfrac{\\nu_0 + T}{2}\\log|\\tilde S|,

    where ``T = T_obs - p``, ``X_*`` stacks data and dummies and ``S~`` is the posterior scale
    (GLP 2015, Appendix, with ``Omega = Omega_0``, ``b = B_0``, ``Psi = S_0``, ``d = nu_0``).
    Each determinant pair comes from the triangular factor of one Householder QR of
    ``[X | Y]`` (its leading block factors ``X'X``, its trailing block the residual
    cross-product ``S``), so nothing is inverted or differenced. Needs ``T_d >= k + n`` (the
    Minnesota dummies have exactly ``k + n`` rows, more with the other blocks).

    Parameters
    ----------
    y : ndarray (T_obs, n)
        The balanced estimation sample.
    lags : int
    y_d, x_d : ndarray
        Dummy observations (see :func:`minnesota_dummies`); ``x_d`` of full column rank.

    Returns
    -------
    float

    References
    ----------
    Giannone, D., Lenza, M. and Primiceri, G. E. (2015). Prior selection for vector
    autoregressions. *Review of Economics and Statistics* 97(2), 436-451.
    Zellner, A. (1971). *An Introduction to Bayesian Inference in Econometrics*. Wiley, ch. 8
    (the matrix-variate normal-Wishart marginal likelihood).
    """
    return _Evidence(y, lags)(y_d, x_d)


def _log_multigamma(a: float, n: int) -> float:
    """log Gamma_n(a) = n(n-1)/4 log(pi) + sum_j log Gamma(a - j/2), j = 0..n-1 (no scipy import)."""
    return 0.25 * n * (n - 1) * math.log(math.pi) + sum(math.lgamma(a - 0.5 * j) for j in range(n))


class _Evidence:
    """The log marginal likelihood as a function of the dummies; the data's lag design built once."""

    def __init__(self, y: np.ndarray, lags: int):
        self.yt, self.x = lag_design(y, lags)

    def __call__(self, y_d: np.ndarray, x_d: np.ndarray) -> float:
        yt, x = self.yt, self.x
        t, n = yt.shape
        k = x_d.shape[1]
        nu0 = len(y_d) + 2 - k
        if nu0 <= n - 1:
            raise ValueError(f"the dummy prior has nu_0 = {nu0} <= n - 1 = {n - 1}: Sigma's prior is "
                             "improper and the marginal likelihood undefined")
        # R of [X | Y] = [[R_xx, Q'Y], [0, R_yy]] with R_yy'R_yy the residual cross-product
        # of Y on X: both determinants from one QR each, no Q formed, no solve
        r0 = np.linalg.qr(np.concatenate([x_d, y_d], axis=1), mode="r")
        r = np.linalg.qr(np.concatenate([np.concatenate([x, yt], axis=1),
                                         np.concatenate([x_d, y_d], axis=1)]), mode="r")
        d0, d1 = np.log(np.abs(np.diag(r0))), np.log(np.abs(np.diag(r)))
        logdet_prior, ld_s0 = 2.0 * d0[:k].sum(), 2.0 * d0[k:].sum()
        logdet_post, ld_s = 2.0 * d1[:k].sum(), 2.0 * d1[k:].sum()
        nu = nu0 + t
        return float(-0.5 * n * t * math.log(math.pi) + _log_multigamma(0.5 * nu, n)
                     - _log_multigamma(0.5 * nu0, n) + 0.5 * n * (logdet_prior - logdet_post)
                     + 0.5 * nu0 * ld_s0 - 0.5 * nu * ld_s)


#: GLP (2015) hyperpriors (Gamma: mode, standard deviation) and search bounds of each
#: hyperparameter chosen by the data ("from memory": GLP 2015, Section 3 and their replication
#: code; lambda: mode 0.2, sd 0.4; mu and delta: mode 1, sd 1; bounds [1e-4, 5] and [1e-4, 50])
HYPERPARAMETERS: dict[str, dict[str, float]] = {
    "tightness": {"mode": 0.2, "sd": 0.4, "low": 1e-4, "high": 5.0},
    "sum_of_coefficients": {"mode": 1.0, "sd": 1.0, "low": 1e-4, "high": 50.0},
    "co_persistence": {"mode": 1.0, "sd": 1.0, "low": 1e-4, "high": 50.0},
}


def gamma_log_density(x: float, mode: float, sd: float) -> float:
    """Log density at ``x`` of the Gamma law with the given mode and standard deviation.

    Shape ``a`` and scale ``s`` solve ``(a - 1) s = mode`` and ``a s^2 = sd^2``:
    ``s = (sqrt(mode^2 + 4 sd^2) - mode) / 2``, ``a = 1 + mode / s``.
    """
    scale = 0.5 * (math.sqrt(mode * mode + 4.0 * sd * sd) - mode)
    shape = 1.0 + mode / scale
    return (shape - 1.0) * math.log(x) - x / scale - shape * math.log(scale) - math.lgamma(shape)


@dataclass(frozen=True)
class HyperparameterChoice:
    """Hyperparameters chosen by the marginal likelihood (None = block off).

    Attributes
    ----------
    values : dict
        ``tightness``, ``sum_of_coefficients``, ``co_persistence`` as used.
    log_ml : float
        Log marginal likelihood at ``values``.
    log_hyperprior : float
        Log hyperprior density of the chosen values (0 with a flat hyperprior).
    evaluations : int
        Marginal likelihood evaluations spent.
    at_bound : bool
        A chosen value sits on its search bound.
    """

    values: dict
    log_ml: float
    log_hyperprior: float
    evaluations: int
    at_bound: bool


def _dummy_scaler(y: np.ndarray, lags: int, lag_decay: float, prior_mean: np.ndarray,
                  scales: np.ndarray, soc: bool, cop: bool):
    """Dummies as a function of (lambda, mu, delta): each block is its unit-scale rows over its value.

    Equal to :func:`minnesota_dummies` (up to rounding), built once instead of per evaluation.
    """
    n = y.shape[1]
    y1, x1 = minnesota_dummies(y, lags, 1.0, lag_decay, prior_mean, scales,
                               1.0 if soc else None, 1.0 if cop else None)
    n_lag = n * lags
    n_soc = int((prior_mean * y[:lags].mean(axis=0) != 0).sum()) if soc else 0
    start_soc = n_lag + n + 1

    def build(lam: float, mu: float | None, delta: float | None) -> tuple[np.ndarray, np.ndarray]:
        inv = np.ones(len(y1))
        inv[:n_lag] = 1.0 / lam
        if soc:
            inv[start_soc:start_soc + n_soc] = 1.0 / mu
        if cop:
            inv[-1] = 1.0 / delta
        return y1 * inv[:, None], x1 * inv[:, None]

    return build


def _golden_max(f, lo: float, hi: float, tol: float = 1e-6) -> tuple[float, float]:
    """Maximise a unimodal ``f`` on ``[lo, hi]`` by golden-section search (Kiefer 1953)."""
    inv_phi = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = lo, hi
    c, d = b - inv_phi * (b - a), a + inv_phi * (b - a)
    fc, fd = f(c), f(d)
    while b - a > tol:
        if fc >= fd:
            b, d, fd = d, c, fc
            c = b - inv_phi * (b - a)
            fc = f(c)
        else:
            a, c, fc = c, d, fd
            d = a + inv_phi * (b - a)
            fd = f(d)
    # the ends too: the maximum may sit on the search bound
    cands = [(fc, c), (fd, d), (f(lo), lo) if a == lo else (-np.inf, a),
             (f(hi), hi) if b == hi else (-np.inf, b)]
    fx, x = max(cands)
    return x, fx


def _box_newton_max(f, x0: np.ndarray, lo: np.ndarray, hi: np.ndarray, h: float = 1e-3,
                    max_iter: int = 50) -> tuple[np.ndarray, float]:
    """Maximise a smooth ``f`` on a box by projected quasi-Newton steps.

    Central-difference gradients; the Hessian by central differences at the start, then BFGS
    updates (kept negative definite: an update is skipped when the curvature condition fails).
    Coordinates on a bound whose gradient points out of the box are held there; steps are
    clipped to the box and halved until ``f`` rises (Armijo) - the projected Newton scheme of
    Bertsekas (1982) with the BFGS update of Nocedal & Wright (2006, ch. 6).
    """
    x = np.clip(np.asarray(x0, dtype=float), lo, hi)
    fx = f(x)
    d = len(x)
    eye = np.eye(d) * h

    def grad(z, fz):
        fp = np.array([f(z + e) for e in eye])
        fm = np.array([f(z - e) for e in eye])
        return (fp - fm) / (2 * h), fp, fm

    g, fp, fm = grad(x, fx)
    a = np.diag(-(fp - 2 * fx + fm) / h**2)  # a = minus the Hessian, kept positive definite
    for i in range(d):
        for j in range(i + 1, d):
            a[i, j] = a[j, i] = -(f(x + eye[i] + eye[j]) - f(x + eye[i] - eye[j])
                                  - f(x - eye[i] + eye[j]) + f(x - eye[i] - eye[j])) / (4 * h * h)
    val, vec = np.linalg.eigh(a)
    a = (vec * np.maximum(val, 1e-6)) @ vec.T
    for _ in range(max_iter):
        held = ((x <= lo) & (g < 0)) | ((x >= hi) & (g > 0))
        free = ~held
        if not free.any() or np.abs(g[free]).max() < 1e-6:
            break
        step = np.zeros(d)
        step[free] = np.linalg.solve(a[np.ix_(free, free)], g[free])
        t, moved = 1.0, False
        for _ in range(30):
            xn = np.clip(x + t * step, lo, hi)
            fn = f(xn)
            if fn >= fx + 1e-4 * float(g @ (xn - x)):
                moved = True
                break
            t *= 0.5
        if not moved or fn < fx:
            break
        gn, _, _ = grad(xn, fn)
        sv, yv = xn - x, -(gn - g)  # yv: change of the gradient of -f
        if sv @ yv > 1e-12:
            av = a @ sv
            a = a - np.outer(av, av) / (sv @ av) + np.outer(yv, yv) / (yv @ sv)
        done = np.abs(sv).max() < 1e-7
        x, fx, g = xn, fn, gn
        if done:
            break
    return x, fx


def choose_hyperparameters(y: np.ndarray, lags: int, lag_decay: float, prior_mean: np.ndarray,
                           scales: np.ndarray, fixed: dict, free: list[str],
                           hyperprior: str = "flat") -> HyperparameterChoice:
    """Maximise the marginal likelihood (or the hyperparameters' posterior) over ``free``.

    The objective is :func:`log_marginal_likelihood` of the dummy prior built with the
    hyperparameters, plus (``hyperprior="glp"``) the log Gamma hyperprior densities of
    :data:`HYPERPARAMETERS` (GLP 2015); it is maximised over the logarithms of the free
    hyperparameters within their bounds, starting from the best point of a coarse grid
    (9 points for one hyperparameter, 5 per dimension for several): one by golden-section
    search in the grid point's bracket, several by projected quasi-Newton steps. Numpy and the
    standard library only (no scipy.optimize import in the workers). The residual scales
    ``s_i`` stay at their AR(1) values (GLP also estimate them; here they are fixed, as in BGR
    2010).

    Parameters
    ----------
    y : ndarray (T, n)
        Balanced estimation sample.
    lags, lag_decay : int, float
    prior_mean, scales : ndarray (n,)
    fixed : dict
        Values of the hyperparameters not chosen here (``None`` = block off).
    free : list of str
        Names among ``tightness``, ``sum_of_coefficients``, ``co_persistence``.
    hyperprior : {"flat", "glp"}

    Returns
    -------
    HyperparameterChoice

    References
    ----------
    Giannone, D., Lenza, M. and Primiceri, G. E. (2015). Prior selection for vector
    autoregressions. *Review of Economics and Statistics* 97(2), 436-451.
    Kiefer, J. (1953). Sequential minimax search for a maximum. *Proceedings of the American
    Mathematical Society* 4(3), 502-506.
    Bertsekas, D. P. (1982). Projected Newton methods for optimization problems with simple
    constraints. *SIAM Journal on Control and Optimization* 20(2), 221-246.
    Nocedal, J. and Wright, S. J. (2006). *Numerical Optimization*, 2nd ed. Springer, ch. 6.
    """
    names = ("tightness", "sum_of_coefficients", "co_persistence")
    vals0 = {**fixed, **dict.fromkeys(free, 1.0)}
    build = _dummy_scaler(y, lags, lag_decay, prior_mean, scales,
                          vals0["sum_of_coefficients"] is not None, vals0["co_persistence"] is not None)
    evidence = _Evidence(y, lags)
    lo = np.log([HYPERPARAMETERS[k]["low"] for k in free])
    hi = np.log([HYPERPARAMETERS[k]["high"] for k in free])
    count = [0]

    def values_at(theta) -> dict:
        return {**fixed, **{k: float(math.exp(v)) for k, v in zip(free, theta, strict=True)}}

    def prior(vals: dict) -> float:
        if hyperprior != "glp":
            return 0.0
        return sum(gamma_log_density(vals[k], HYPERPARAMETERS[k]["mode"], HYPERPARAMETERS[k]["sd"])
                   for k in free)

    def objective(theta) -> float:
        count[0] += 1
        vals = values_at(np.atleast_1d(theta))
        return evidence(*build(*(vals[k] for k in names))) + prior(vals)

    if len(free) == 1:
        grid = np.linspace(lo[0], hi[0], 9)
        i = int(np.argmax([objective(g) for g in grid]))
        x, _ = _golden_max(objective, grid[max(i - 1, 0)], grid[min(i + 1, 8)])
        theta = np.array([x])
    else:
        axes = [np.linspace(a, b, 5) for a, b in zip(lo, hi, strict=True)]
        grid = np.array(np.meshgrid(*axes, indexing="ij")).reshape(len(free), -1).T
        start = grid[int(np.argmax([objective(g) for g in grid]))]
        theta, _ = _box_newton_max(objective, start, lo, hi)
    vals = values_at(theta)
    y_d, x_d = minnesota_dummies(y, lags, vals["tightness"], lag_decay, prior_mean, scales,
                                 vals["sum_of_coefficients"], vals["co_persistence"])
    log_ml = evidence(y_d, x_d)
    at_bound = bool(np.any((theta <= lo + 1e-6) | (theta >= hi - 1e-6)))
    return HyperparameterChoice(vals, log_ml, prior(vals), count[0], at_bound)


def ragged_split(values: np.ndarray) -> tuple[int, int, int]:
    """``(start, stop, tail_end)``: the balanced block ``[start, stop)`` and the tail ``[stop, tail_end)``.

    The balanced block is the run of fully observed rows ending at the last fully observed row;
    the tail runs to the last row with any observation (trailing all-NaN rows are ignored).
    """
    start, stop = trailing_run(values)
    any_obs = np.flatnonzero(np.isfinite(values).any(axis=1))
    tail_end = int(any_obs[-1]) + 1 if len(any_obs) else stop
    return start, stop, max(tail_end, stop)


@register
class BayesianVAR(BaseModel):
    """BVAR with a conjugate Minnesota-type prior; exact posterior draws, conditional ragged edge.

    All variables of the information set form the system; only the target variables are
    reported. Estimation uses the balanced block (the run of rows where every variable is
    observed, ending at the last such row). Values observed after it (the ragged edge) are
    conditions on the predictive path: per parameter draw the missing tail cells are drawn from
    their exact Gaussian conditional given the observed ones (Waggoner & Zha 1999; see
    :mod:`harness.models.conditional`), and the paths continue from there.

    Parameters
    ----------
    lags : int, default 4
        VAR order ``p``.
    tightness : float or "ml", default 0.2
        Overall prior standard deviation ``lambda`` (Litterman's lambda_1); large = loose, and as
        ``lambda -> inf`` with the other blocks off the posterior mean tends to OLS. ``"ml"``:
        chosen at each origin by maximising the marginal likelihood of the balanced sample
        (Giannone, Lenza & Primiceri 2015; see ``hyperprior``).
    cross : float, default 1.0
        Relative tightness of other variables' lags. In the conjugate form the prior covariance
        is ``Sigma (x) Omega_0``: one ``Omega_0`` for all equations, so own and cross lags of a
        regressor cannot be shrunk differently and only ``cross = 1`` is coherent (Kadiyala &
        Karlsson 1997; Sims & Zha 1998). Other values raise; model ``bvar_sv`` has a
        free ``cross``.
    lag_decay : float, default 1.0
        ``d``: the prior s.d. of lag ``l`` coefficients falls as ``l^{-d}`` (BGR 2010 use ``d=1``).
    sum_of_coefficients : float, "ml" or None, default None
        ``mu`` of the sum-of-coefficients dummies (Doan, Litterman & Sims 1984); None = off;
        ``"ml"`` = chosen with the other ``"ml"`` hyperparameters. Rows of variables whose
        prior mean is 0 are all zero and left out.
    co_persistence : float, "ml" or None, default None
        ``delta`` of the co-persistence ("dummy initial observation") row (Sims 1993;
        Sims & Zha 1998); None = off; ``"ml"`` = chosen with the other ``"ml"`` ones.
    prior_mean : float or dict, default 0.0
        Prior mean of the own first-lag coefficient: 1 for levels (random walk), 0 for growth
        rates (white noise); a scalar or ``{variable: value}``.
    shocks : {"gaussian", "student"}, default "gaussian"
        Distribution of future shocks in the predictive paths. ``"student"`` draws
        ``e_t = sqrt(w_t) F z_t`` with ``w_t ~ (df - 2)/chi^2_df``: Student-t with the same
        covariance ``Sigma``. Estimation is Gaussian either way.
    df : float, default 5.0
        Degrees of freedom of Student-t shocks (> 2).
    hyperprior : {"flat", "glp"}, default "flat"
        For ``"ml"`` hyperparameters: ``"flat"`` maximises the marginal likelihood
        (empirical Bayes); ``"glp"`` maximises the hyperparameters' posterior under GLP's
        Gamma hyperpriors (:data:`HYPERPARAMETERS`). Unused when none is ``"ml"``.

    Attributes
    ----------
    posterior_ : NIWPosterior
    diagnostics_ : dict of float
        Per forecast: the hyperparameters used (``tightness``, and ``sum_of_coefficients`` /
        ``co_persistence`` when on), ``log_ml`` (the log marginal likelihood at them), and
        when any is ``"ml"`` also ``log_hyperprior``, ``ml_evaluations`` and ``at_bound``
        (1.0 if a chosen value sits on its search bound).

    Notes
    -----
    Residual scales ``s_i`` come from univariate AR(1) regressions on the balanced block.
    Stationarity is not imposed: explosive draws are kept (no rejection step), so long-horizon
    draws may fan out. With Student-t shocks the ragged-edge conditioning is exact given the
    scale mixture variables, which are drawn from their prior (not updated by the tail).
    The balanced block needs at least ``lags + 3`` rows.

    References
    ----------
    Litterman (1986), *JBES* 4(1), 25-38; Kadiyala & Karlsson (1997), *JAE* 12(2), 99-132;
    Sims & Zha (1998), *IER* 39(4), 949-968; Bańbura, Giannone & Reichlin (2010), *JAE* 25(1),
    71-92; Sims, C. A. (1993). A nine-variable probabilistic macroeconomic forecasting model. In
    *Business Cycles, Indicators and Forecasting*, NBER, 179-212; Waggoner & Zha (1999),
    *Review of Economics and Statistics* 81(4), 639-651.
    """

    name = "bvar"
    # 2: zero-mean sum-of-coefficients rows dropped (changes Sigma's prior dof); "ml" options
    version = "2"
    param_constraints = {
        "lags": [Interval(int, 1, None)],
        "tightness": [Interval(float, 0, None, closed="neither"), Options("ml")],
        # the conjugate NIW form's Kronecker structure shrinks own and cross lags alike: only 1
        # is coherent (use model 'bvar_sv' for cross != 1)
        "cross": [Interval(float, 1.0, 1.0)],
        "lag_decay": [Interval(float, 0, None)],
        "sum_of_coefficients": [Interval(float, 0, None, closed="neither"), Options("ml"), None],
        "co_persistence": [Interval(float, 0, None, closed="neither"), Options("ml"), None],
        "prior_mean": [Interval(float), PerVariable(Interval(float))],
        "shocks": [Options("gaussian", "student")],
        "df": [Interval(float, 0, None, closed="neither")],
        "hyperprior": [Options("flat", "glp")],
    }

    def __init__(self, lags: int = 4, tightness: float | str = 0.2, cross: float = 1.0,
                 lag_decay: float = 1.0, sum_of_coefficients: float | str | None = None,
                 co_persistence: float | str | None = None, prior_mean: float | dict = 0.0,
                 shocks: str = "gaussian", df: float = 5.0, hyperprior: str = "flat"):
        self.lags = lags
        self.tightness = tightness
        self.cross = cross
        self.lag_decay = lag_decay
        self.sum_of_coefficients = sum_of_coefficients
        self.co_persistence = co_persistence
        self.prior_mean = prior_mean
        self.shocks = shocks
        self.df = df
        self.hyperprior = hyperprior

    @classmethod
    def check_params(cls, params: dict, model: str) -> None:
        """Cross-parameter rules: Student-t shocks need ``df > 2`` (finite variance)."""
        if params.get("shocks") == "student" and float(params.get("df", 5.0)) <= 2:
            raise ModelParameterError(f"model {model!r}: parameter 'df' must be > 2 for Student-t "
                                      f"shocks with finite variance; got {params.get('df')!r}")

    def fit_sample(self, y: np.ndarray, variables: list[str]) -> NIWPosterior:
        """The posterior from a balanced sample ``(T, n)`` (columns in ``variables`` order)."""
        self.validate()
        p = int(self.lags)
        if y.shape[0] < p + 3:
            raise self._fail(f"the balanced sample (all {len(variables)} variables observed) needs "
                             f"at least lags + 3 = {p + 3} periods, got {y.shape[0]}")
        scales = ar1_scales(y)
        m = per_variable(self, "prior_mean", self.prior_mean, variables)
        names = ("tightness", "sum_of_coefficients", "co_persistence")
        given = {k: getattr(self, k) for k in names}
        free = [k for k in names if given[k] == "ml"]
        fixed = {k: (None if v is None else float(v)) for k, v in given.items() if k not in free}
        diag: dict[str, float] = {}
        if free:
            choice = choose_hyperparameters(y, p, float(self.lag_decay), m, scales, fixed, free,
                                            self.hyperprior)
            hyper = choice.values
            diag.update(log_hyperprior=choice.log_hyperprior,
                        ml_evaluations=float(choice.evaluations),
                        at_bound=float(choice.at_bound))
        else:
            hyper = fixed
        y_d, x_d = minnesota_dummies(y, p, hyper["tightness"], float(self.lag_decay), m, scales,
                                     hyper["sum_of_coefficients"], hyper["co_persistence"])
        self.scales_ = scales
        self.diagnostics_ = {**{k: float(v) for k, v in hyper.items() if v is not None},
                             "log_ml": log_marginal_likelihood(y, p, y_d, x_d), **diag}
        return niw_posterior(y, p, y_d, x_d)

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        lay, n_draws = layout, layout.n_draws
        start, stop, tail_end = ragged_split(lay.values)
        post = self.fit_sample(lay.values[start:stop], lay.variables)
        self.posterior_ = post
        self.balanced_end_ = str(lay.periods[stop - 1]) if stop else None
        steps = lay.steps(lay.ordinals[stop - 1])
        horizon = max(int(steps.max()), tail_end - stop)
        draws = np.zeros((n_draws, *steps.shape))
        if horizon > 0:
            paths = self.simulate(post, lay.values[stop - post.lags:stop], lay.values[stop:tail_end],
                                  horizon, n_draws, rng)
            j, k = np.nonzero(steps > 0)
            draws[:, j, k] = paths[:, steps[j, k] - 1, lay.columns[j]]
        return draws

    def simulate(self, post: NIWPosterior, init: np.ndarray, tail: np.ndarray, horizon: int,
                 n_draws: int, rng: np.random.Generator) -> np.ndarray:
        """Posterior predictive paths ``(D, horizon, n)`` from the balanced end, given the tail."""
        coefs, f = post.sample(n_draws, rng)
        n = f.shape[1]
        z = rng.standard_normal((n_draws, horizon, n))
        if self.shocks == "student":
            w = (float(self.df) - 2.0) / rng.chisquare(float(self.df), size=(n_draws, horizon))
            f = f[:, None] * np.sqrt(w)[:, :, None, None]
        return var_paths(coefs, init, f, z, tail if tail.shape[0] else None)
