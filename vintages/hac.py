"""Long-run (HAC) variances: the one kernel estimator behind every serially dependent test.

Used by the revision regressions of :mod:`vintages.revisions` and by the forecast-comparison
tests of :mod:`harness.compare` (Diebold–Mariano, fluctuation test), so that both read their
autocovariances the same way.

Autocovariances use divisor ``T`` and can be restricted to pairs of observations that really
are ``j`` periods apart: pass ``positions`` (one integer time index per observation, e.g. the
target period's ordinal) and a sub-sample with gaps (the quarters of two recessions, say) never
pairs the last quarter of one recession with the first of the next as if they were neighbours.

References
----------
Newey, W. K. and West, K. D. (1987). A simple, positive semi-definite, heteroskedasticity and
autocorrelation consistent covariance matrix. Econometrica 55(3), 703-708.
Newey, W. K. and West, K. D. (1994). Automatic lag selection in covariance matrix estimation.
Review of Economic Studies 61(4), 631-653.
Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business &
Economic Statistics 13(3), 253-263.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

Kernel = Literal["bartlett", "rectangular"]
KERNELS: tuple[str, ...] = ("bartlett", "rectangular")

__all__ = ["KERNELS", "Kernel", "kernel_weights", "long_run_covariance", "long_run_variance",
           "newey_west_lags", "ols_hac"]


def newey_west_lags(n: int) -> int:
    """Rule-of-thumb truncation lag ``floor(4 (n/100)^(2/9))`` (Newey and West 1994)."""
    if n <= 0:
        return 0
    return int(np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0)))


def kernel_weights(lags: int, kernel: Kernel = "bartlett") -> np.ndarray:
    """Weights ``w_1..w_L``: rectangular ``1``; Bartlett ``1 - j/(L + 1)`` (Newey & West 1987).

    Raises
    ------
    ValueError
        Unknown kernel or negative ``lags``.
    """
    if kernel not in KERNELS:
        raise ValueError(f"unknown kernel {kernel!r}; expected one of {sorted(KERNELS)}")
    if isinstance(lags, bool) or int(lags) != lags or lags < 0:
        raise ValueError(f"lags must be an integer >= 0; got {lags!r}")
    j = np.arange(1, int(lags) + 1, dtype=np.float64)
    return np.ones(int(lags)) if kernel == "rectangular" else 1.0 - j / (lags + 1.0)


def _pairs_at(positions: np.ndarray, j: int) -> tuple[np.ndarray, np.ndarray]:
    """Index pairs (s, t), s < t, with ``positions[t] - positions[s] == j`` (positions increasing)."""
    t = np.searchsorted(positions, positions + j)
    ok = t < positions.size
    s = np.flatnonzero(ok)
    t = t[ok]
    hit = positions[t] == positions[s] + j
    return s[hit], t[hit]


def long_run_covariance(g, lags: int, kernel: Kernel = "bartlett", *, demean: bool = True,
                        positions=None) -> np.ndarray:
    """Long-run covariance ``G_0 + sum_j w_j (G_j + G_j')`` of a ``(T, k)`` series, divisor ``T``.

    Parameters
    ----------
    g : array_like, shape (T,) or (T, k)
    lags : int
        Truncation lag ``L`` (>= 0); at most ``T - 1`` lags carry information.
    kernel : {"bartlett", "rectangular"}
    demean : bool
        Subtract the column means first.
    positions : array_like of int, shape (T,), optional
        Strictly increasing time index of each row. Autocovariance ``j`` then sums only the
        pairs exactly ``j`` positions apart; default ``0..T-1`` (consecutive rows).

    Returns
    -------
    ndarray, shape (k, k)

    Raises
    ------
    ValueError
        Bad kernel or lags, or positions that are not strictly increasing integers of length T.
    """
    x = np.asarray(g, dtype=np.float64)
    x = x[:, None] if x.ndim == 1 else x
    t = x.shape[0]
    if demean and t:
        x = x - x.mean(axis=0)
    w = kernel_weights(lags, kernel)
    out = x.T @ x
    if positions is None:
        for j in range(1, min(int(lags), t - 1) + 1):
            c = x[j:].T @ x[:-j]
            out += w[j - 1] * (c + c.T)
    else:
        pos = np.asarray(positions)
        if pos.shape != (t,) or not np.issubdtype(pos.dtype, np.integer):
            raise ValueError(f"positions must be {t} integers, one per observation; got {pos.shape} "
                             f"of {pos.dtype}")
        if t > 1 and not (np.diff(pos) > 0).all():
            raise ValueError("positions must be strictly increasing (time order, no duplicates)")
        for j in range(1, int(lags) + 1):
            s, u = _pairs_at(pos, j)
            if s.size:
                c = x[u].T @ x[s]
                out += w[j - 1] * (c + c.T)
    return out / max(t, 1)


def long_run_variance(d, lags: int, kernel: Kernel = "rectangular", *, demean: bool = True,
                      positions=None) -> float:
    """Long-run variance ``gamma_0 + 2 sum_{j=1}^{L} w_j gamma_j`` of one series.

    Rectangular weights are those of Diebold & Mariano (1995) (may be negative); Bartlett weights
    those of Newey & West (1987) (never negative). See :func:`long_run_covariance` for
    ``positions``.

    Parameters
    ----------
    d : array_like, shape (T,)
    lags : int
    kernel : {"bartlett", "rectangular"}
    demean : bool
    positions : array_like of int, optional

    Returns
    -------
    float
    """
    return float(long_run_covariance(np.asarray(d, dtype=np.float64).ravel(), lags, kernel,
                                     demean=demean, positions=positions)[0, 0])


def ols_hac(y, X, lags: int, *, small_sample: bool = False) -> dict[str, np.ndarray]:
    """OLS with a Newey–West (Bartlett kernel) covariance of the coefficients.

    Parameters
    ----------
    y : array_like, shape (n,)
    X : array_like, shape (n, k)
        Regressors (include a column of ones for an intercept).
    lags : int
        Truncation lag ``L`` ≥ 0; autocovariance ``j`` gets weight ``1 - j/(L+1)``.
    small_sample : bool
        Multiply the covariance by ``n/(n-k)``.

    Returns
    -------
    dict
        ``beta``, ``se``, ``t``, ``p`` (two-sided, standard normal), each shape (k,), and
        ``cov`` (k, k).

    Raises
    ------
    ValueError
        When shapes disagree, ``lags`` is negative, or there are fewer observations than
        regressors.

    References
    ----------
    Newey, W. K. and West, K. D. (1987). *Econometrica* 55(3), 703–708.
    """
    from scipy import special

    y = np.asarray(y, dtype=np.float64).ravel()
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    n, k = X.shape
    if len(y) != n:
        raise ValueError(f"ols_hac: y has {len(y)} observations but X has {n} rows; expected equal")
    if lags < 0:
        raise ValueError(f"ols_hac: lags must be ≥ 0; got {lags}")
    if n <= k:
        raise ValueError(f"ols_hac: needs more observations than regressors; got n={n}, k={k}")
    xtx_inv = np.linalg.inv(X.T @ X)
    beta = xtx_inv @ (X.T @ y)
    # the scores x_t u_t have mean zero by the normal equations: no demeaning
    S = n * long_run_covariance(X * (y - X @ beta)[:, None], int(lags), "bartlett", demean=False)
    cov = xtx_inv @ S @ xtx_inv
    if small_sample:
        cov *= n / (n - k)
    se = np.sqrt(np.diag(cov))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = beta / se
    p = 2.0 * special.ndtr(-np.abs(t))
    return {"beta": beta, "se": se, "t": t, "p": p, "cov": cov}
