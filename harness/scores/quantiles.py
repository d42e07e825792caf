"""Quantile (pinball) scores, central-interval coverage and the interval score of ensembles.

References
----------
Gneiting, T. and Ranjan, R. (2011). Comparing density forecasts using threshold- and
quantile-weighted scoring rules. Journal of Business & Economic Statistics 29(3), 411-422.
Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
estimation. Journal of the American Statistical Association 102(477), 359-378 (interval score,
eq. 43).
Hyndman, R. J. and Fan, Y. (1996). Sample quantiles in statistical packages. The American
Statistician 50(4), 361-365.
"""

from __future__ import annotations

import numpy as np

from harness.scores.kernels import (
    DEFAULT_COVERAGE_LEVELS,
    QuantileMethod,
    _check,
    _check_levels,
    _check_method,
    _coverage_hits,
    _pinball,
    _quantiles_from_sorted,
    _row_chunks,
    _sort_rows,
)


def ensemble_quantiles(draws, levels, *, method: QuantileMethod = "linear") -> np.ndarray:
    """Quantiles of each ensemble, NaN draws ignored (numpy ``nanquantile`` definitions).

    Parameters
    ----------
    draws : ndarray, shape (n, m)
    levels : sequence of float in (0, 1), length L
    method : {"inverted_cdf", "linear"}
        Hyndman & Fan (1996) definition 1 or 7.

    Returns
    -------
    ndarray, shape (n, L)
    """
    _check_method(method, "ensemble_quantiles")
    a = _check_levels(levels, "ensemble_quantiles")
    _, x = _check(np.zeros(np.asarray(draws).shape[0]), draws, "ensemble_quantiles")
    out = np.empty((x.shape[0], a.size))
    for sl in _row_chunks(*x.shape):
        s, k, _ = _sort_rows(x[sl])
        out[sl] = _quantiles_from_sorted(s, k, a, method)
    return out


def pinball_loss(obs, quantiles, levels) -> np.ndarray:
    """Quantile score QS_alpha(q, y) = (1{y < q} - alpha)(q - y) of given quantile forecasts.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    quantiles : ndarray, shape (n, L)
        Forecast quantiles, column j at level ``levels[j]``.
    levels : sequence of float in (0, 1), length L

    Returns
    -------
    ndarray, shape (n, L)

    References
    ----------
    Gneiting, T. and Ranjan, R. (2011). JBES 29(3), 411-422, eq. 3 (this scaling, so that the
    CRPS is twice the integral over levels).
    """
    a = _check_levels(levels, "pinball_loss")
    y = np.asarray(obs, dtype=np.float64)
    q = np.asarray(quantiles, dtype=np.float64)
    if q.ndim == 1:
        q = q[:, None]
    if y.ndim != 1 or q.shape != (y.shape[0], a.size):
        raise ValueError(f"pinball_loss: expected obs (n,) and quantiles (n, {a.size}); got "
                         f"{y.shape} and {q.shape}")
    return _pinball(y, q, a)


def quantile_score(obs, draws, levels, *, method: QuantileMethod = "linear") -> np.ndarray:
    """Quantile (pinball) score of the ensemble's empirical quantiles at each level.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    levels : sequence of float in (0, 1), length L
    method : {"inverted_cdf", "linear"}
        Quantile estimator (default numpy's "linear", Hyndman & Fan definition 7).

    Returns
    -------
    ndarray, shape (n, L)
        ``(1{y < q} - alpha)(q - y)``; at alpha = 0.5 this is half the absolute error of the
        median.

    References
    ----------
    Gneiting, T. and Ranjan, R. (2011). JBES 29(3), 411-422.
    """
    _check_method(method, "quantile_score")
    a = _check_levels(levels, "quantile_score")
    y, x = _check(obs, draws, "quantile_score")
    out = np.empty((y.shape[0], a.size))
    for sl in _row_chunks(*x.shape):
        s, k, _ = _sort_rows(x[sl])
        out[sl] = _pinball(y[sl], _quantiles_from_sorted(s, k, a, method), a)
    return out


def coverage(obs, draws, levels=DEFAULT_COVERAGE_LEVELS, *,
             method: QuantileMethod = "linear") -> np.ndarray:
    """Hit indicators of central prediction intervals [q_{(1-c)/2}, q_{(1+c)/2}] (closed).

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    levels : sequence of float in (0, 1), length L
        Nominal coverages c.
    method : {"inverted_cdf", "linear"}

    Returns
    -------
    ndarray, shape (n, L)
        1.0 when the observation is inside the interval, 0.0 outside, NaN when missing.
    """
    _check_method(method, "coverage")
    c = _check_levels(levels, "coverage")
    y, x = _check(obs, draws, "coverage")
    ends = np.concatenate([(1 - c) / 2, (1 + c) / 2])
    out = np.empty((y.shape[0], c.size))
    for sl in _row_chunks(*x.shape):
        s, k, _ = _sort_rows(x[sl])
        q = _quantiles_from_sorted(s, k, ends, method)
        out[sl] = _coverage_hits(y[sl], q[:, : c.size], q[:, c.size:])
    return out


def interval_score_from_q(y: np.ndarray, lower: np.ndarray, upper: np.ndarray,
                          alpha: float) -> np.ndarray:
    """Interval score of given central-interval ends (Gneiting & Raftery 2007, eq. 43).

    ``IS_alpha(l, u; y) = (u - l) + (2/alpha)(l - y) 1{y < l} + (2/alpha)(y - u) 1{y > u}`` for
    the central ``(1 - alpha)`` interval; NaN where ``y`` or the ends are missing.
    """
    with np.errstate(invalid="ignore"):
        below = np.where(y < lower, lower - y, 0.0)
        above = np.where(y > upper, y - upper, 0.0)
        out = (upper - lower) + (2.0 / alpha) * (below + above)
    out[np.isnan(y) | np.isnan(lower) | np.isnan(upper)] = np.nan
    return out


def interval_score(obs, draws, levels=(0.5, 0.8), *, method: QuantileMethod = "linear") -> np.ndarray:
    """Interval score of the ensemble's central prediction intervals at each nominal level.

    The interval at level ``c`` runs from the ensemble's ``(1 - c)/2`` to its ``(1 + c)/2``
    quantile; with ``alpha = 1 - c`` its score is the interval's width plus ``2/alpha`` times
    the distance by which the observation falls outside (a proper scoring rule for the pair of
    quantiles; lower is better).

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    levels : sequence of float in (0, 1), length L
        Nominal coverages ``c`` (0.5 and 0.8: the central 50 % and 80 % intervals).
    method : {"inverted_cdf", "linear"}
        Quantile estimator of the interval ends.

    Returns
    -------
    ndarray, shape (n, L)

    References
    ----------
    Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
    estimation. Journal of the American Statistical Association 102(477), 359-378, eq. 43.

    Examples
    --------
    >>> float(interval_score([0.0], [[-1.0, 1.0]], [0.5], method="inverted_cdf")[0, 0])
    2.0
    """
    _check_method(method, "interval_score")
    c = _check_levels(levels, "interval_score")
    y, x = _check(obs, draws, "interval_score")
    ends = np.concatenate([(1 - c) / 2, (1 + c) / 2])
    out = np.empty((y.shape[0], c.size))
    for sl in _row_chunks(*x.shape):
        s_, k, _ = _sort_rows(x[sl])
        q = _quantiles_from_sorted(s_, k, ends, method)
        for j, cj in enumerate(c):
            out[sl, j] = interval_score_from_q(y[sl], q[:, j], q[:, c.size + j], 1.0 - cj)
    return out
