"""Long-run (HAC) variances: the one kernel estimator behind every serially dependent test.

Used by the revision regressions of :mod:`vintages.revisions` and by the forecast-comparison
tests of :mod:`harness.compare` (Diebold–Mariano, fluctuation test), so that both read their
autocovariances the same way.

Two families of estimates of ``Omega = sum_j gamma_j`` (2 pi times the spectral density at
frequency zero):

* weighted autocovariances (kernel estimates): :func:`long_run_covariance`,
  :func:`long_run_variance`, with rectangular or Bartlett weights;
* the weighted periodogram with the Daniell kernel: :func:`daniell_covariance`,
  :func:`daniell_variance` (the average of the periodogram over the first ``m`` Fourier
  frequencies), whose fixed-``m`` limit gives Student-t critical values (Coroneo and Iacone
  2020).

Autocovariances use divisor ``T`` and can be restricted to pairs of observations that really
are ``j`` periods apart: pass ``positions`` (one integer time index per observation, e.g. the
target period's ordinal) and a sub-sample with gaps (the quarters of two recessions, say) never
pairs the last quarter of one recession with the first of the next as if they were neighbours.
The periodogram takes the same ``positions`` as the phases of its Fourier sums, which makes it
exactly the Fourier transform of those gap-aware autocovariances (see :func:`daniell_covariance`).

References
----------
Newey, W. K. and West, K. D. (1987). A simple, positive semi-definite, heteroskedasticity and
autocorrelation consistent covariance matrix. Econometrica 55(3), 703-708.
Newey, W. K. and West, K. D. (1994). Automatic lag selection in covariance matrix estimation.
Review of Economic Studies 61(4), 631-653.
Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business &
Economic Statistics 13(3), 253-263.
Coroneo, L. and Iacone, F. (2020). Comparing predictive accuracy in small samples using
fixed-smoothing asymptotics. Journal of Applied Econometrics 35(4), 391-409.
Parzen, E. (1963). On spectral analysis with missing observations and amplitude modulation.
Sankhya A 25(4), 383-392.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

Kernel = Literal["bartlett", "rectangular"]
KERNELS: tuple[str, ...] = ("bartlett", "rectangular")

__all__ = ["KERNELS", "Kernel", "daniell_covariance", "daniell_variance", "kernel_weights",
           "long_run_covariance", "long_run_variance", "newey_west_lags", "ols_hac"]


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
        pos = _positions(positions, t)
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


def _positions(positions, t: int) -> np.ndarray:
    pos = np.asarray(positions)
    if pos.shape != (t,) or not np.issubdtype(pos.dtype, np.integer):
        raise ValueError(f"positions must be {t} integers, one per observation; got {pos.shape} "
                         f"of {pos.dtype}")
    if t > 1 and not (np.diff(pos) > 0).all():
        raise ValueError("positions must be strictly increasing (time order, no duplicates)")
    return pos


def daniell_covariance(g, m: int, *, demean: bool = True, positions=None) -> np.ndarray:
    """Weighted-periodogram long-run covariance, Daniell kernel over the first ``m`` frequencies.

    ``Omega = (1/m) sum_{j=1}^{m} Re(w_j w_j^H)`` with the Fourier sums
    ``w_j = T^{-1/2} sum_t x_t exp(-i lambda_j p_t)`` at ``lambda_j = 2 pi j / T``, ``x`` the
    (demeaned) rows and ``p_t`` the time positions (default ``0..T-1``). Each term is the
    periodogram at ``lambda_j`` times 2 pi, so the estimate is positive semi-definite; with
    consecutive positions it is what ``numpy.fft.fft`` gives and the mean drops out at every
    ``lambda_j`` (demeaning changes nothing).

    With ``positions`` the Fourier sums run over the actual time positions (the "amplitude
    modulated" series of Parzen 1963: missing periods count as zeros). Expanding the square,
    ``Re(w_j w_j^H) = sum_k cos(lambda_j k) G_k`` where ``G_k`` is the autocovariance from the
    pairs exactly ``k`` positions apart (divisor T, as in :func:`long_run_covariance`), so the
    estimate is the lag-window estimate ``G_0 + sum_{k>=1} W(k) (G_k + G_k')`` with
    ``W(k) = (1/m) sum_j cos(2 pi j k / T)`` applied to the gap-aware autocovariances: a pair
    is only ever weighted by its true distance. Without gaps no pair is T or more apart; with
    gaps the window is periodic in k (period T), and the demeaning matters (the mean no longer
    drops out), so keep ``demean=True`` unless the rows are centred at a known mean.

    Parameters
    ----------
    g : array_like, shape (T,) or (T, k)
    m : int
        Number of Fourier frequencies, ``1 <= m <= (T - 1) // 2`` (so that every frequency is
        below pi and carries two degrees of freedom).
    demean : bool
        Subtract the column means first.
    positions : array_like of int, shape (T,), optional
        Strictly increasing time index of each row.

    Returns
    -------
    ndarray, shape (k, k)

    Raises
    ------
    ValueError
        ``m`` out of range or bad positions.

    References
    ----------
    Coroneo, L. and Iacone, F. (2020). Comparing predictive accuracy in small samples using
    fixed-smoothing asymptotics. Journal of Applied Econometrics 35(4), 391-409 (the WPE with
    the Daniell kernel, section 3).
    Hualde, J. and Iacone, F. (2017). Fixed bandwidth asymptotics for the studentized mean of
    fractionally integrated processes. Economics Letters 150, 39-43.
    Parzen, E. (1963). On spectral analysis with missing observations and amplitude
    modulation. Sankhya A 25(4), 383-392.
    """
    x = np.asarray(g, dtype=np.float64)
    x = x[:, None] if x.ndim == 1 else x
    t = x.shape[0]
    if isinstance(m, bool) or int(m) != m or not 1 <= m <= (t - 1) // 2:
        raise ValueError(f"m must be an integer in [1, (T - 1) // 2] = [1, {(t - 1) // 2}] for T = {t}; "
                         f"got {m!r}")
    m = int(m)
    if demean:
        x = x - x.mean(axis=0)
    if positions is None:
        w = np.fft.rfft(x, axis=0)[1:m + 1]  # (m, k)
    else:
        pos = _positions(positions, t)
        lam = 2.0 * np.pi * np.arange(1, m + 1) / t
        w = np.exp(-1j * np.outer(lam, pos - pos[0])) @ x
    return (w.real.T @ w.real + w.imag.T @ w.imag) / (m * t)


def daniell_variance(d, m: int, *, demean: bool = True, positions=None) -> float:
    """Weighted-periodogram long-run variance of one series (see :func:`daniell_covariance`).

    Parameters
    ----------
    d : array_like, shape (T,)
    m : int
    demean : bool
    positions : array_like of int, optional

    Returns
    -------
    float
    """
    return float(daniell_covariance(np.asarray(d, dtype=np.float64).ravel(), m, demean=demean,
                                    positions=positions)[0, 0])


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
