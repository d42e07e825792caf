"""State-space form of the mixed-frequency dynamic factor model, and its NumPy reference algorithms.

The model (standardised data ``x``; Bańbura & Modugno 2014, with the quarterly aggregation of
Mariano & Murasawa 2003):

.. math::

    f_t &= A_1 f_{t-1} + \\dots + A_p f_{t-p} + u_t, \\quad u_t \\sim N(0, Q), \\\\
    x^M_{it} &= \\lambda_i' f_t + e_{it}, \\\\
    x^Q_{jt} &= \\lambda_j' \\textstyle\\sum_{k=0}^{4} w_k f_{t-k}
               + \\sum_{k=0}^{4} w_k e_{j,t-k}, \\quad w = (1, 2, 3, 2, 1),

with idiosyncratic terms ``e_it = rho_i e_{i,t-1} + eps_it`` (``eps ~ N(0, sigma_i^2)``), or,
with ``idio_ar1=False``, white noise: for a monthly series then an observation error of variance
``sigma_i^2`` (no state), for a quarterly series a white-noise monthly term aggregated like the
factors. A quarterly value is observed at its quarter's last month, NaN elsewhere.

State vector ``alpha_t = (f_t', ..., f_{t-L+1}', e^M_t', e^Q_{1,t..t-4}', ...)``: ``L`` factor
lags (``L = max(p + 1, 5)`` with quarterly series, ``p + 1`` without: one lag more than the VAR
needs so that the M-step reads ``E[f_t f_{t-1..t-p}']`` inside one state vector), the monthly
idiosyncratic terms (AR(1) case only), and five lags of each quarterly idiosyncratic term. The
initial state is the stationary law of every block (zero mean), as in statsmodels'
``DynamicFactorMQ`` default initialisation, so the log-likelihood is comparable with it.

This module holds the system matrices and the obviously-correct NumPy references: a dense
multivariate Kalman filter and smoother (Durbin & Koopman 2012, sec. 4.3 and 4.4), the lag-one
smoothed covariances (their sec. 4.7), the simulation smoother of Durbin & Koopman (2002) on a
window at the end of the sample, and observation weights by brute force. The compiled fast path
lives in :mod:`harness.models.dfm_fast`; tests bind the two.

References
----------
Bańbura, M. and Modugno, M. (2014). Maximum likelihood estimation of factor models on datasets
with arbitrary pattern of missing data. *Journal of Applied Econometrics* 29(1), 133-160.
Mariano, R. S. and Murasawa, Y. (2003). A new coincident index of business cycles based on
monthly and quarterly series. *Journal of Applied Econometrics* 18(4), 427-443.
Durbin, J. and Koopman, S. J. (2002). A simple and efficient simulation smoother for state space
time series analysis. *Biometrika* 89(3), 603-615.
Durbin, J. and Koopman, S. J. (2012). *Time Series Analysis by State Space Methods*, 2nd ed.,
Oxford University Press.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

__all__ = [
    "MM_WEIGHTS",
    "DFMParams",
    "StateLayout",
    "from_statsmodels_vector",
    "StateSpace",
    "kalman_reference",
    "simulation_smoother",
    "stationary_factor_cov",
    "system",
    "to_statsmodels_vector",
]

#: Mariano & Murasawa (2003) weights of the monthly latent growth in a quarterly growth rate
MM_WEIGHTS = np.array([1.0, 2.0, 3.0, 2.0, 1.0])
_LOG2PI = float(np.log(2.0 * np.pi))


@dataclass(frozen=True)
class StateLayout:
    """Where each block sits in the state vector (fixed by the model's dimensions).

    Attributes
    ----------
    quarterly : ndarray (n,) bool
        Which observed series are quarterly (panel column order).
    n_factors, factor_lags : int
        ``r`` and the VAR order ``p``.
    idio_ar1 : bool
        AR(1) idiosyncratic terms (monthly ones in the state) or white noise.
    """

    quarterly: np.ndarray
    n_factors: int
    factor_lags: int
    idio_ar1: bool

    @property
    def n(self) -> int:
        return int(len(self.quarterly))

    @property
    def lags_stored(self) -> int:
        """``L``: factor lags in the state."""
        return max(self.factor_lags + 1, 5 if self.quarterly.any() else 0)

    @cached_property
    def monthly(self) -> np.ndarray:
        return np.flatnonzero(~self.quarterly)

    @cached_property
    def quarterly_idx(self) -> np.ndarray:
        return np.flatnonzero(self.quarterly)

    @property
    def n_factor_states(self) -> int:
        return self.lags_stored * self.n_factors

    @cached_property
    def monthly_idio_state(self) -> np.ndarray:
        """State index of each series' monthly idiosyncratic term (-1: none)."""
        out = np.full(self.n, -1, dtype=np.int64)
        if self.idio_ar1:
            out[self.monthly] = self.n_factor_states + np.arange(len(self.monthly))
        return out

    @cached_property
    def quarterly_idio_state(self) -> np.ndarray:
        """State index of ``e_{j,t}`` (then its four lags) of each quarterly series (-1: none)."""
        out = np.full(self.n, -1, dtype=np.int64)
        start = self.n_factor_states + (len(self.monthly) if self.idio_ar1 else 0)
        out[self.quarterly_idx] = start + 5 * np.arange(len(self.quarterly_idx))
        return out

    @property
    def m(self) -> int:
        """State dimension."""
        return (self.n_factor_states + (len(self.monthly) if self.idio_ar1 else 0)
                + 5 * len(self.quarterly_idx))

    @cached_property
    def block_states(self) -> np.ndarray:
        """Factor states then quarterly idiosyncratic states: the block whose full smoothed
        covariance the M-step needs."""
        q = self.quarterly_idio_state[self.quarterly_idx]
        qs = (q[:, None] + np.arange(5)[None, :]).ravel()
        return np.concatenate([np.arange(self.n_factor_states), qs]).astype(np.int64)

    @cached_property
    def idio_states(self) -> np.ndarray:
        """State indices of the monthly idiosyncratic terms (AR(1) case; empty otherwise)."""
        s = self.monthly_idio_state
        return s[s >= 0]


@dataclass(frozen=True)
class DFMParams:
    """Parameters of the model on standardised data.

    Attributes
    ----------
    loadings : ndarray (n, r)
        Monthly series: on ``f_t``; quarterly series: on the aggregate ``sum_k w_k f_{t-k}``.
    factor_ar : ndarray (p, r, r)
        ``A_1, ..., A_p``.
    factor_cov : ndarray (r, r)
        ``Q``.
    idio_ar : ndarray (n,)
        ``rho_i`` (zero with white-noise idiosyncratic terms).
    idio_var : ndarray (n,)
        ``sigma_i^2``.
    """

    loadings: np.ndarray
    factor_ar: np.ndarray
    factor_cov: np.ndarray
    idio_ar: np.ndarray
    idio_var: np.ndarray

    def flat(self) -> np.ndarray:
        """All parameters as one vector (for convergence checks and comparisons)."""
        return np.concatenate([self.loadings.ravel(), self.factor_ar.ravel(),
                               self.factor_cov.ravel(), self.idio_ar, self.idio_var])


def to_statsmodels_vector(params: DFMParams, idio_ar1: bool = True) -> np.ndarray:
    """The parameters as statsmodels' ``DynamicFactorMQ`` parameter vector (for comparisons).

    Order: loadings, factor VAR ``[A_1 ... A_p]`` row by row, the lower triangle of
    ``chol(Q)``, the idiosyncratic AR coefficients (if ``idio_ar1``), the idiosyncratic
    variances. statsmodels puts monthly series before quarterly ones: the series order of
    ``params`` must already be so.
    """
    r = params.loadings.shape[1]
    chol = np.linalg.cholesky(params.factor_cov)[np.tril_indices(r)]
    parts = [params.loadings.ravel(), np.concatenate(list(params.factor_ar), axis=1).ravel(), chol]
    if idio_ar1:
        parts.append(params.idio_ar)
    parts.append(params.idio_var)
    return np.concatenate(parts)


def from_statsmodels_vector(v: np.ndarray, n: int, n_factors: int, factor_lags: int,
                            idio_ar1: bool = True) -> DFMParams:
    """Inverse of :func:`to_statsmodels_vector` (one factor block loading on every series)."""
    v = np.asarray(v, dtype=float)
    r, p = n_factors, factor_lags
    lo = v[: n * r].reshape(n, r)
    k = n * r
    a = v[k:k + r * r * p].reshape(r, r * p)
    k += r * r * p
    chol = np.zeros((r, r))
    chol[np.tril_indices(r)] = v[k:k + r * (r + 1) // 2]
    k += r * (r + 1) // 2
    rho = v[k:k + n] if idio_ar1 else np.zeros(n)
    k += n if idio_ar1 else 0
    return DFMParams(lo, np.stack([a[:, i * r:(i + 1) * r] for i in range(p)]), chol @ chol.T,
                     rho, v[k:k + n])


@dataclass(frozen=True)
class StateSpace:
    """Dense system matrices: ``x_t = Z alpha_t + eps_t`` (``eps ~ N(0, diag(h))``),
    ``alpha_{t+1} = T alpha_t + eta_t`` (``eta ~ N(0, Q)``), ``alpha_1 ~ N(a1, P1)``."""

    Z: np.ndarray
    h: np.ndarray
    T: np.ndarray
    Q: np.ndarray
    a1: np.ndarray
    P1: np.ndarray
    layout: StateLayout = field(repr=False)

    @property
    def m(self) -> int:
        return self.T.shape[0]


def _companion(factor_ar: np.ndarray, lags: int) -> np.ndarray:
    p, r, _ = factor_ar.shape
    c = np.zeros((lags * r, lags * r))
    c[:r, : p * r] = np.concatenate(list(factor_ar), axis=1) if p else 0.0
    c[r:, :-r] = np.eye((lags - 1) * r)
    return c


def spectral_radius(factor_ar: np.ndarray) -> float:
    """Largest modulus of the eigenvalues of the factor VAR's companion matrix."""
    p = factor_ar.shape[0]
    if p == 0:
        return 0.0
    return float(np.max(np.abs(np.linalg.eigvals(_companion(factor_ar, p)))))


def stationary_factor_cov(factor_ar: np.ndarray, factor_cov: np.ndarray, lags: int) -> np.ndarray:
    """Stationary covariance of ``(f_t', ..., f_{t-L+1}')'`` for a stable VAR(p).

    The companion Lyapunov equation ``S = C S C' + Q_c`` of the VAR(p) block is solved by
    vectorisation, ``vec S = (I - C (x) C)^{-1} vec Q_c``; autocovariances of higher order
    follow from the Yule-Walker recursion ``Gamma(k) = sum_l A_l Gamma(k - l)`` (Lütkepohl 2005,
    sec. 2.1.4), and block ``(i, j)`` of the result is ``Gamma(j - i)``.

    Raises
    ------
    ValueError
        If the VAR is not stable (spectral radius >= 1).
    """
    p, r, _ = factor_ar.shape
    if p == 0:
        return np.kron(np.eye(lags), factor_cov)
    c = _companion(factor_ar, p)
    if spectral_radius(factor_ar) >= 1.0:
        raise ValueError("the factor VAR is not stable (companion spectral radius >= 1)")
    k = p * r
    qc = np.zeros((k, k))
    qc[:r, :r] = factor_cov
    s = np.linalg.solve(np.eye(k * k) - np.kron(c, c), qc.ravel()).reshape(k, k)
    s = 0.5 * (s + s.T)
    gam = [s[:r, j * r:(j + 1) * r] for j in range(p)]  # Gamma(j) = E f_t f_{t-j}'
    for j in range(p, lags):
        gam.append(sum(factor_ar[l_] @ gam[j - l_ - 1] for l_ in range(p)))
    out = np.zeros((lags * r, lags * r))
    for i in range(lags):
        for j in range(i, lags):
            out[i * r:(i + 1) * r, j * r:(j + 1) * r] = gam[j - i]
            out[j * r:(j + 1) * r, i * r:(i + 1) * r] = gam[j - i].T
    return out


def system(params: DFMParams, layout: StateLayout) -> StateSpace:
    """The state-space matrices of the model at ``params`` (see the module docstring)."""
    r, p, n, lags = layout.n_factors, layout.factor_lags, layout.n, layout.lags_stored
    m, nf = layout.m, layout.n_factor_states
    Z = np.zeros((n, m))
    h = np.zeros(n)
    T = np.zeros((m, m))
    Q = np.zeros((m, m))
    P1 = np.zeros((m, m))
    T[:nf, :nf] = _companion(params.factor_ar, lags) if p else np.eye(nf, k=-r)
    Q[:r, :r] = params.factor_cov
    P1[:nf, :nf] = stationary_factor_cov(params.factor_ar, params.factor_cov, lags)
    es, qs = layout.monthly_idio_state, layout.quarterly_idio_state
    for i in range(n):
        lam, rho, s2 = params.loadings[i], params.idio_ar[i], params.idio_var[i]
        if layout.quarterly[i]:
            for k, w in enumerate(MM_WEIGHTS):
                Z[i, k * r:(k + 1) * r] = w * lam
                Z[i, qs[i] + k] = w
            q0 = qs[i]
            T[q0, q0] = rho
            T[q0 + 1:q0 + 5, q0:q0 + 4] = np.eye(4)
            Q[q0, q0] = s2
            lag = np.arange(5)
            P1[q0:q0 + 5, q0:q0 + 5] = s2 / (1 - rho * rho) * rho ** np.abs(lag[:, None] - lag[None])
        else:
            Z[i, :r] = lam
            if layout.idio_ar1:
                e = es[i]
                Z[i, e] = 1.0
                T[e, e] = rho
                Q[e, e] = s2
                P1[e, e] = s2 / (1 - rho * rho)
            else:
                h[i] = s2
    return StateSpace(Z, h, T, Q, np.zeros(m), P1, layout)


# ---------------------------------------------------------------------------- reference filter
@dataclass
class ReferenceOutput:
    """Everything the dense reference filter and smoother compute (``T`` periods, state ``m``)."""

    llf: float
    a_pred: np.ndarray  # (T + 1, m)
    P_pred: np.ndarray  # (T + 1, m, m)
    a_filt: np.ndarray  # (T, m)
    P_filt: np.ndarray  # (T, m, m)
    mean: np.ndarray  # (T, m) smoothed
    cov: np.ndarray  # (T, m, m) smoothed
    autocov: np.ndarray  # (T, m, m): Cov(alpha_t, alpha_{t-1} | Y); row 0 is zero


def kalman_reference(x: np.ndarray, ss: StateSpace, a1: np.ndarray | None = None,
                     P1: np.ndarray | None = None) -> ReferenceOutput:
    """Dense Kalman filter and smoother with missing values (the obviously-correct reference).

    Filter (Durbin & Koopman 2012, eq. 4.24, observed rows only), log-likelihood by the
    prediction-error decomposition (their eq. 7.2, including the ``log 2 pi`` constant), state
    smoother (their eq. 4.44: ``r_{t-1} = Z'F^{-1}v + L'r_t``, ``N_{t-1} = Z'F^{-1}Z + L'N_t L``,
    ``alpha_hat = a + P r_{t-1}``, ``V = P - P N_{t-1} P``) and the lag-one smoothed covariance
    ``Cov(alpha_{t+1}, alpha_t | Y) = (I - P_{t+1} N_t) L_t P_t`` (their sec. 4.7).

    Parameters
    ----------
    x : ndarray (T, n)
        Observations, NaN where missing.
    ss : StateSpace
    a1, P1 : ndarray, optional
        Initial state law (default the system's).
    """
    nt, n = x.shape
    m = ss.m
    a = ss.a1.copy() if a1 is None else np.array(a1, dtype=float)
    P = ss.P1.copy() if P1 is None else np.array(P1, dtype=float)
    a_pred, P_pred = np.zeros((nt + 1, m)), np.zeros((nt + 1, m, m))
    a_filt, P_filt = np.zeros((nt, m)), np.zeros((nt, m, m))
    store = []
    llf = 0.0
    for t in range(nt):
        a_pred[t], P_pred[t] = a, P
        o = np.isfinite(x[t])
        if o.any():
            Z = ss.Z[o]
            v = x[t, o] - Z @ a
            F = Z @ P @ Z.T + np.diag(ss.h[o])
            Fi = np.linalg.inv(F)
            K = P @ Z.T @ Fi
            a = a + K @ v
            P = P - K @ Z @ P
            sign, logdet = np.linalg.slogdet(F)
            llf += -0.5 * (o.sum() * _LOG2PI + logdet + v @ Fi @ v)
            store.append((o, v, Fi, K))
        else:
            store.append((o, None, None, None))
        a_filt[t], P_filt[t] = a, P
        a = ss.T @ a
        P = ss.T @ P @ ss.T.T + ss.Q
        P = 0.5 * (P + P.T)
    a_pred[nt], P_pred[nt] = a, P
    mean, cov, autocov = np.zeros((nt, m)), np.zeros((nt, m, m)), np.zeros((nt, m, m))
    r, N = np.zeros(m), np.zeros((m, m))
    n_next = None  # N_t (pairs with P_{t+1})
    for t in range(nt - 1, -1, -1):
        o, v, Fi, K = store[t]
        if v is not None:
            Z = ss.Z[o]
            L = ss.T @ (np.eye(m) - K @ Z)
            r = Z.T @ Fi @ v + L.T @ r
            N = Z.T @ Fi @ Z + L.T @ N @ L
        else:
            L = ss.T
            r = L.T @ r
            N = L.T @ N @ L
        mean[t] = a_pred[t] + P_pred[t] @ r
        cov[t] = P_pred[t] - P_pred[t] @ N @ P_pred[t]
        if t + 1 < nt:
            # Cov(alpha_{t+1}, alpha_t) = (I - P_{t+1} N_t) L_t P_t, with L_t P_t = T P_{t|t}
            autocov[t + 1] = (np.eye(m) - P_pred[t + 1] @ n_next) @ ss.T @ P_filt[t]
        n_next = N
    return ReferenceOutput(float(llf), a_pred, P_pred, a_filt, P_filt, mean, cov, autocov)


# ---------------------------------------------------------------------------- simulation smoother
def _window_filter(x: np.ndarray, ss: StateSpace, P1: np.ndarray):
    """Covariance part of the filter on a window: per step (observed, F^{-1}, K, L) and P_t."""
    steps, Ps = [], []
    P = P1
    m = ss.m
    for t in range(x.shape[0]):
        Ps.append(P)
        o = np.isfinite(x[t])
        if o.any():
            Z = ss.Z[o]
            F = Z @ P @ Z.T + np.diag(ss.h[o])
            Fi = np.linalg.inv(F)
            K = P @ Z.T @ Fi
            L = ss.T @ (np.eye(m) - K @ Z)
            Pf = P - K @ Z @ P
        else:
            Fi = K = None
            L = ss.T
            Pf = P
        steps.append((o, Fi, K, L))
        P = ss.T @ Pf @ ss.T.T + ss.Q
        P = 0.5 * (P + P.T)
    return steps, Ps


def _window_smooth(d: np.ndarray, a0: np.ndarray, ss: StateSpace, steps, Ps) -> np.ndarray:
    """Smoothed state means for many data sets at once: ``d`` (W, n, D), ``a0`` (m, D)."""
    w = d.shape[0]
    a = a0
    a_pred, vs = [], []
    for t in range(w):
        o, Fi, K, L = steps[t]
        a_pred.append(a)
        if K is not None:
            v = d[t, o] - ss.Z[o] @ a
            vs.append(v)
            a = ss.T @ (a + K @ v)
        else:
            vs.append(None)
            a = ss.T @ a
    r = np.zeros_like(a0)
    out = np.empty((w, *a0.shape))
    for t in range(w - 1, -1, -1):
        o, Fi, K, L = steps[t]
        if K is not None:
            r = ss.Z[o].T @ (Fi @ vs[t]) + L.T @ r
        else:
            r = L.T @ r
        out[t] = a_pred[t] + Ps[t] @ r
    return out


def simulation_smoother(x: np.ndarray, ss: StateSpace, a_start: np.ndarray, P_start: np.ndarray,
                        n_draws: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Draws of the states on a window given all data, by the simulation smoother of DK (2002).

    By the Markov property, the law of ``alpha_tau, ..., alpha_{tau+W-1}`` given all
    observations equals the smoothing law of the state-space model restricted to the window and
    started at the Kalman filter's prediction ``alpha_tau | Y_{<tau} ~ N(a_start, P_start)``
    (the observations before ``tau`` enter only through it). On that window the mean-correction
    simulation smoother draws ``alpha+`` and ``x+`` from the model and returns
    ``alpha~ = alpha+ + S(x - x+)``, where ``S`` is the smoother with zero initial mean
    (Durbin & Koopman 2002, sec. 2.3: ``alpha~ = alpha_hat + alpha+ - alpha_hat+``, and the
    smoother is linear). Observed cells are those finite in ``x``.

    Parameters
    ----------
    x : ndarray (W, n)
        Observations on the window (NaN where missing or in the future).
    ss : StateSpace
    a_start, P_start : ndarray (m,), (m, m)
        The filter's one-step prediction of ``alpha_tau``.
    n_draws : int
    rng : numpy.random.Generator

    Returns
    -------
    draws : ndarray (W, m, D)
        State draws.
    mean : ndarray (W, m)
        The smoothed state means ``E[alpha_t | Y]`` on the window.

    References
    ----------
    Durbin, J. and Koopman, S. J. (2002), *Biometrika* 89(3), 603-615.
    """
    w, n = x.shape
    m = ss.m
    steps, Ps = _window_filter(x, ss, P_start)
    # alpha+ from the model: start ~ N(a_start, P_start), state and observation shocks
    chol0 = _psd_factor(P_start)
    cq = _psd_factor(ss.Q)
    alpha = np.empty((w, m, n_draws))
    alpha[0] = a_start[:, None] + chol0 @ rng.standard_normal((m, n_draws))
    for t in range(1, w):
        alpha[t] = ss.T @ alpha[t - 1] + cq @ rng.standard_normal((m, n_draws))
    eps = np.sqrt(ss.h)[None, :, None] * rng.standard_normal((w, n, n_draws))
    xplus = np.einsum("nm,wmd->wnd", ss.Z, alpha) + eps
    d = np.where(np.isfinite(x)[:, :, None], x[:, :, None] - xplus, np.nan)
    draws = alpha + _window_smooth(d, np.zeros((m, n_draws)), ss, steps, Ps)
    mean = _window_smooth(np.where(np.isfinite(x), x, np.nan)[:, :, None], a_start[:, None], ss,
                          steps, Ps)[:, :, 0]
    return draws, mean


def _psd_factor(a: np.ndarray) -> np.ndarray:
    """A square root ``C`` with ``C C' = a`` for a positive semi-definite ``a`` (eigenvalues)."""
    vals, vecs = np.linalg.eigh(0.5 * (a + a.T))
    return vecs * np.sqrt(np.clip(vals, 0.0, None))[None, :]
