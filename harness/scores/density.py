"""Density scores of ensembles: the kernel log score and the probability integral transform.

References
----------
Silverman, B. W. (1986). Density Estimation for Statistics and Data Analysis. Chapman & Hall.
Gneiting, T., Balabdaoui, F. and Raftery, A. E. (2007). Probabilistic forecasts, calibration
and sharpness. JRSS B 69(2), 243-268.
"""

from __future__ import annotations

import numpy as np

from harness.scores.kernels import (
    DEFAULT_DENSITY_FLOOR,
    TIES,
    Ties,
    _check,
    _log_score_from_sorted,
    _mean_from_sorted,
    _pit_from_sorted,
    _row_chunks,
    _silverman,
    _sort_rows,
)


def silverman_bandwidth(draws) -> np.ndarray:
    """Silverman's rule-of-thumb bandwidth 0.9 min(sd, IQR/1.34) m^(-1/5) of each ensemble.

    sd uses ddof=1, the IQR numpy's linear quantiles; when the IQR is zero the sd is used.

    Parameters
    ----------
    draws : ndarray, shape (n, m)

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Silverman, B. W. (1986). Density Estimation for Statistics and Data Analysis. Chapman &
    Hall, eq. (3.31).
    """
    _, x = _check(np.zeros(np.asarray(draws).shape[0]), draws, "silverman_bandwidth")
    out = np.empty(x.shape[0])
    for sl in _row_chunks(*x.shape):
        s, k, full = _sort_rows(x[sl])
        out[sl] = _silverman(s, k, full, _mean_from_sorted(s, k, full))
    return out


def log_score(obs, draws, bandwidth: str | float | np.ndarray = "silverman", *,
              density_floor: float = DEFAULT_DENSITY_FLOOR) -> np.ndarray:
    """Negative log of a Gaussian kernel density estimate of the draws, at the observation.

    ``f(y) = (1/(k h)) sum_i phi((y - x_i)/h)``, computed as a log-sum-exp around the nearest
    draw so that no term underflows; the density is then floored at ``density_floor`` (default
    1e-10, i.e. the score is capped at about 23.03) so one far outlier gives a large, finite
    score. Ensembles with zero spread have no density and get the capped score.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    bandwidth : "silverman", float or ndarray of shape (n,)
        Kernel standard deviation h; "silverman" is :func:`silverman_bandwidth`.
    density_floor : float
        Lower bound on the density (in 1/units of the variable).

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Silverman, B. W. (1986). Density Estimation for Statistics and Data Analysis, eq. (3.31).
    Gneiting, T. and Raftery, A. E. (2007). JASA 102(477), 359-378 (the logarithmic score).
    """
    y, x = _check(obs, draws, "log_score")
    if not density_floor > 0:
        raise ValueError(f"log_score: density_floor must be positive; got {density_floor!r}")
    if isinstance(bandwidth, str):
        if bandwidth != "silverman":
            raise ValueError(f"log_score: unknown bandwidth rule {bandwidth!r}; expected one of "
                             "['silverman'] or a positive number")
        bw = None
    else:
        bw = np.broadcast_to(np.asarray(bandwidth, dtype=np.float64), y.shape)
    out = np.empty(y.shape[0])
    for sl in _row_chunks(*x.shape):
        s, k, full = _sort_rows(x[sl])
        h = _silverman(s, k, full, _mean_from_sorted(s, k, full)) if bw is None else bw[sl]
        out[sl] = _log_score_from_sorted(s, y[sl], k, full, h, density_floor)
    return out


def pit(obs, draws, *, ties: Ties = "mid", seed: int = 0) -> np.ndarray:
    """Probability integral transform: the ensemble's empirical CDF at the observation.

    ``pit = (#{x < y} + u #{x = y}) / k``: with ``ties="mid"`` u = 1/2 (mid-rank, deterministic),
    with ``ties="random"`` u ~ U(0, 1) from ``numpy.random.default_rng(seed)`` (the randomised
    PIT of a distribution with atoms). Without ties the PIT takes the values ``c/k``.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    ties : {"mid", "random"}
    seed : int
        Seed for ``ties="random"``.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Gneiting, T., Balabdaoui, F. and Raftery, A. E. (2007). Probabilistic forecasts, calibration
    and sharpness. JRSS B 69(2), 243-268 (randomised PIT).
    """
    if ties not in TIES:
        raise ValueError(f"pit: unknown ties rule {ties!r}; expected one of {sorted(TIES)}")
    y, x = _check(obs, draws, "pit")
    rng = np.random.default_rng(seed) if ties == "random" else None
    out = np.empty(y.shape[0])
    for sl in _row_chunks(*x.shape):
        s, k, _ = _sort_rows(x[sl])
        out[sl] = _pit_from_sorted(s, y[sl], k, ties, rng)
    return out
