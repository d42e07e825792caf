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

__all__ = ["BayesianVAR", "NIWPosterior", "minnesota_dummies", "niw_posterior", "sample_inverse_wishart"]

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
      ``X_d = (1_p' (x) diag(m_i ybar_i))/mu``; inactive for variables with ``m_i = 0``, as in BGR;
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
        rows_y.append(d)
        rows_x.append(np.concatenate([np.tile(d, (1, lags)), np.zeros((n, 1))], axis=1))
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
    tightness : float, default 0.2
        Overall prior standard deviation ``lambda`` (Litterman's lambda_1); large = loose, and as
        ``lambda -> inf`` with the other blocks off the posterior mean tends to OLS.
    cross : float, default 1.0
        Relative tightness of other variables' lags. In the conjugate form the prior covariance
        is ``Sigma (x) Omega_0``: one ``Omega_0`` for all equations, so own and cross lags of a
        regressor cannot be shrunk differently and only ``cross = 1`` is coherent (Kadiyala &
        Karlsson 1997; Sims & Zha 1998). Other values raise; model ``bvar_sv`` has a
        free ``cross``.
    lag_decay : float, default 1.0
        ``d``: the prior s.d. of lag ``l`` coefficients falls as ``l^{-d}`` (BGR 2010 use ``d=1``).
    sum_of_coefficients : float or None, default None
        ``mu`` of the sum-of-coefficients dummies (Doan, Litterman & Sims 1984); None = off.
    co_persistence : float or None, default None
        ``delta`` of the co-persistence ("dummy initial observation") row (Sims 1993;
        Sims & Zha 1998); None = off.
    prior_mean : float or dict, default 0.0
        Prior mean of the own first-lag coefficient: 1 for levels (random walk), 0 for growth
        rates (white noise); a scalar or ``{variable: value}``.
    shocks : {"gaussian", "student"}, default "gaussian"
        Distribution of future shocks in the predictive paths. ``"student"`` draws
        ``e_t = sqrt(w_t) F z_t`` with ``w_t ~ (df - 2)/chi^2_df``: Student-t with the same
        covariance ``Sigma``. Estimation is Gaussian either way.
    df : float, default 5.0
        Degrees of freedom of Student-t shocks (> 2).

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
    version = "1"
    param_constraints = {
        "lags": [Interval(int, 1, None)],
        "tightness": [Interval(float, 0, None, closed="neither")],
        # the conjugate NIW form's Kronecker structure shrinks own and cross lags alike: only 1
        # is coherent (use model 'bvar_sv' for cross != 1)
        "cross": [Interval(float, 1.0, 1.0)],
        "lag_decay": [Interval(float, 0, None)],
        "sum_of_coefficients": [Interval(float, 0, None, closed="neither"), None],
        "co_persistence": [Interval(float, 0, None, closed="neither"), None],
        "prior_mean": [Interval(float), PerVariable(Interval(float))],
        "shocks": [Options("gaussian", "student")],
        "df": [Interval(float, 0, None, closed="neither")],
    }

    def __init__(self, lags: int = 4, tightness: float = 0.2, cross: float = 1.0,
                 lag_decay: float = 1.0, sum_of_coefficients: float | None = None,
                 co_persistence: float | None = None, prior_mean: float | dict = 0.0,
                 shocks: str = "gaussian", df: float = 5.0):
        self.lags = lags
        self.tightness = tightness
        self.cross = cross
        self.lag_decay = lag_decay
        self.sum_of_coefficients = sum_of_coefficients
        self.co_persistence = co_persistence
        self.prior_mean = prior_mean
        self.shocks = shocks
        self.df = df

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
        y_d, x_d = minnesota_dummies(y, p, float(self.tightness), float(self.lag_decay), m, scales,
                                     self.sum_of_coefficients, self.co_persistence)
        self.scales_ = scales
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
