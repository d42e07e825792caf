"""The continuous ranked probability score of ensembles, and its weighted forms.

References
----------
Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
estimation. Journal of the American Statistical Association 102(477), 359-378.
Gneiting, T. and Ranjan, R. (2011). Comparing density forecasts using threshold- and
quantile-weighted scoring rules. Journal of Business & Economic Statistics 29(3), 411-422.
Allen, S., Ginsbourger, D. and Ziegel, J. (2023). Evaluating forecasts for high-impact events
using transformed kernel scores. SIAM/ASA Journal on Uncertainty Quantification 11(3), 906-940.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from harness._lazy import special
from harness.scores.kernels import (
    QUANTILE_WEIGHTS,
    TAIL_SIDES,
    TW_WEIGHTS,
    QuantileMethod,
    QuantileWeight,
    TailSide,
    TwWeight,
    _check,
    _check_method,
    _crps_from_sorted,
    _midpoint_levels,
    _row_chunks,
    _sort_rows,
    _weighted_from_quantiles,
)
from harness.scores.quantiles import quantile_score

_PAIRS_LIMIT = 50_000_000  # elements of the all-pairs difference array (~400 MB)


def crps_sorted(obs, draws) -> np.ndarray:
    """CRPS of each ensemble's empirical CDF, by one sort per row (our own fast path).

    Uses ``E|X - y| - E|X - X'|/2`` with ``sum_{i,j} |x_i - x_j| = 2 sum_i (2i - k - 1) x_(i)``
    over the sorted draws, so time is O(m log m) and memory O(m) per forecast (chunked over n).

    Parameters
    ----------
    obs : ndarray, shape (n,)
        Observed values; NaN gives a NaN score.
    draws : ndarray, shape (n, m)
        Predictive draws; NaN draws are ignored, all-NaN rows score NaN.

    Returns
    -------
    ndarray, shape (n,)
        CRPS, in the units of the variable.

    References
    ----------
    Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
    estimation. JASA 102(477), 359-378 (kernel form of the CRPS, eq. 21).
    """
    y, x = _check(obs, draws, "crps_sorted")
    out = np.empty(y.shape[0])
    for sl in _row_chunks(*x.shape):
        s, k, full = _sort_rows(x[sl])
        out[sl] = _crps_from_sorted(s, y[sl], k, full)
    return out


def crps_pairs_reference(obs, draws) -> np.ndarray:
    """CRPS by the direct all-pairs formula: obviously correct, O(m^2) memory, small inputs only.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)

    Returns
    -------
    ndarray, shape (n,)

    Raises
    ------
    ValueError
        If ``n * m * m`` exceeds 50 million elements (about 400 MB).

    References
    ----------
    Gneiting, T. and Raftery, A. E. (2007). JASA 102(477), 359-378, eq. 21.
    """
    y, x = _check(obs, draws, "crps_pairs_reference")
    n, m = x.shape
    if n * m * m > _PAIRS_LIMIT:
        raise ValueError(f"crps_pairs_reference: n*m*m = {n * m * m:,} elements exceeds the "
                         f"reference limit {_PAIRS_LIMIT:,}; use crps_sorted for large inputs")
    x = x.astype(np.float64)
    valid = ~np.isnan(x)
    k = valid.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        e_xy = np.nansum(np.abs(x - y[:, None]), axis=1) / k
        pair = np.abs(x[:, :, None] - x[:, None, :])
        e_xx = np.nansum(pair, axis=(1, 2)) / (k.astype(np.float64) ** 2)
        out = e_xy - 0.5 * e_xx
    out[(k == 0) | np.isnan(y)] = np.nan
    return out


def _properscoring_compiled():
    """properscoring's ``crps_ensemble`` if its numba core is active, else None.

    properscoring (``_crps.py``) does ``try: from ._gufuncs import _crps_ensemble_gufunc as
    _crps_ensemble_core`` and on ImportError binds ``_crps_ensemble_core`` to the all-pairs
    ``_crps_ensemble_vectorized`` (O(m^2) memory). We refuse that path.
    """
    try:
        import numba  # noqa: F401  (properscoring's fast core needs it)
    except ImportError:
        return None
    try:
        from properscoring import _crps
    except Exception:  # a broken numba install fails properscoring's import in many ways
        return None
    core = getattr(_crps, "_crps_ensemble_core", None)
    pairs = getattr(_crps, "_crps_ensemble_vectorized", None)
    if core is None or core is pairs or getattr(core, "__name__", "") == "_crps_ensemble_vectorized":
        return None
    return getattr(_crps, "crps_ensemble", None)


def crps_ensemble(obs, draws) -> np.ndarray:
    """Ensemble CRPS through properscoring's compiled path, never its all-pairs fallback.

    properscoring is imported lazily (its numba core compiles on import, about 3 s). When numba
    is missing, properscoring silently uses an all-pairs O(n m^2)-memory implementation
    (149 GiB for 5,000 forecasts of 2,000 draws); in that case :func:`crps_sorted` is used
    instead. Rows are passed in chunks so properscoring's float64 copy stays small.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Gneiting, T. and Raftery, A. E. (2007). JASA 102(477), 359-378.
    """
    y, x = _check(obs, draws, "crps_ensemble")
    fast = _properscoring_compiled()
    if fast is None:
        return crps_sorted(y, x)
    out = np.empty(y.shape[0])
    for sl in _row_chunks(*x.shape):
        out[sl] = fast(y[sl], x[sl].astype(np.float64, copy=False))
    return out


def weighted_crps_quantile(obs, draws, weight: QuantileWeight = "centre", n_levels: int = 99, *,
                           method: QuantileMethod = "linear") -> np.ndarray:
    """Quantile-weighted CRPS, 2 * integral_0^1 QS_alpha w(alpha) d alpha, by the midpoint rule.

    The integral is taken on the grid ``alpha_j = (j - 1/2) / n_levels``, ``j = 1..n_levels``,
    each node standing for a cell of width ``1/n_levels``. Weights are those of Gneiting &
    Ranjan (2011), unnormalised as published:

    ============  ==================  ======================
    weight        w(alpha)            integral of w over [0,1]
    ============  ==================  ======================
    ``centre``    alpha (1 - alpha)   1/6
    ``tails``     (2 alpha - 1)^2     1/3
    ``left``      (1 - alpha)^2       1/3
    ``right``     alpha^2             1/3
    ``uniform``   1                   1 (gives the CRPS)
    ============  ==================  ======================

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    weight : {"centre", "left", "right", "tails", "uniform"}
    n_levels : int
        Number of midpoint nodes (default 99).
    method : {"inverted_cdf", "linear"}
        Quantile estimator at the nodes.

    Returns
    -------
    ndarray, shape (n,)

    Raises
    ------
    ValueError
        Unknown weight or method, ``n_levels < 1``.

    References
    ----------
    Gneiting, T. and Ranjan, R. (2011). Comparing density forecasts using threshold- and
    quantile-weighted scoring rules. JBES 29(3), 411-422 (quantile-weighted CRPS and its
    weight functions).
    """
    if weight not in QUANTILE_WEIGHTS:
        raise ValueError(f"weighted_crps_quantile: unknown weight {weight!r}; expected one of "
                         f"{sorted(QUANTILE_WEIGHTS)}")
    if int(n_levels) != n_levels or n_levels < 1:
        raise ValueError(f"weighted_crps_quantile: n_levels must be a positive integer; got {n_levels!r}")
    _check_method(method, "weighted_crps_quantile")
    grid = _midpoint_levels(int(n_levels))
    qs = quantile_score(obs, draws, grid, method=method)
    return _weighted_from_quantiles(qs, grid, weight)


def _chain(kind: str, side: str, threshold, scale: float) -> Callable[[np.ndarray], np.ndarray]:
    """Chaining function v with v' = w for the named threshold weight."""
    if kind == "indicator":
        if side == "lower":  # w(z) = 1{z <= r}
            return lambda z: np.minimum(z, threshold)
        return lambda z: np.maximum(z, threshold)  # w(z) = 1{z >= r}

    def up(z):  # antiderivative of Phi((z - r)/s): (z - r) Phi(u) + s phi(u)
        u = (z - threshold) / scale
        return (z - threshold) * special.ndtr(u) + scale * np.exp(-0.5 * u * u) / math.sqrt(2 * math.pi)

    if side == "upper":  # w(z) = Phi((z - r)/s)
        return up
    return lambda z: z - up(z)  # w(z) = 1 - Phi((z - r)/s)


def threshold_weighted_crps(obs, draws, threshold=None, *, side: TailSide = "lower",
                            weight: TwWeight = "indicator", scale: float = 1.0,
                            chain: Callable[[np.ndarray], np.ndarray] | None = None) -> np.ndarray:
    """Threshold-weighted CRPS, integral (F(z) - 1{y <= z})^2 w(z) dz, via a chaining function.

    For a non-decreasing chaining function v with v' = w, twCRPS(F, y) equals the CRPS of the
    law of v(X) at v(y) (Allen, Ginsbourger & Ziegel 2023, the kernel form
    ``E|v(X) - v(y)| - E|v(X) - v(X')|/2``); so the score is exact for the ensemble, computed by
    :func:`crps_sorted` on the transformed draws.

    ===========  =========  ===============================  ===============================
    weight       side       w(z)                             v(z)
    ===========  =========  ===============================  ===============================
    indicator    lower      1{z <= r}                        min(z, r)
    indicator    upper      1{z >= r}                        max(z, r)
    gaussian     upper      Phi((z - r)/s)                   (z - r)Phi(u) + s phi(u)
    gaussian     lower      1 - Phi((z - r)/s)               z minus the line above
    ===========  =========  ===============================  ===============================

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)
    threshold : float or ndarray of shape (n,)
        The threshold r (per forecast if an array). Not needed when ``chain`` is given.
    side : {"lower", "upper"}
        Which tail the weight emphasises.
    weight : {"gaussian", "indicator"}
    scale : float
        s of the Gaussian-CDF weight.
    chain : callable, optional
        A user's own non-decreasing chaining function (vectorised); overrides the above.

    Returns
    -------
    ndarray, shape (n,)

    References
    ----------
    Gneiting, T. and Ranjan, R. (2011). JBES 29(3), 411-422 (threshold-weighted CRPS and the
    indicator and Gaussian-CDF weights).
    Allen, S., Ginsbourger, D. and Ziegel, J. (2023). SIAM/ASA JUQ 11(3), 906-940 (chaining
    function representation).
    """
    y, x = _check(obs, draws, "threshold_weighted_crps")
    if chain is None:
        if side not in TAIL_SIDES:
            raise ValueError(f"threshold_weighted_crps: unknown side {side!r}; expected one of "
                             f"{sorted(TAIL_SIDES)}")
        if weight not in TW_WEIGHTS:
            raise ValueError(f"threshold_weighted_crps: unknown weight {weight!r}; expected one of "
                             f"{sorted(TW_WEIGHTS)}")
        if threshold is None:
            raise ValueError("threshold_weighted_crps: a threshold is required unless chain= is given")
        if not scale > 0:
            raise ValueError(f"threshold_weighted_crps: scale must be positive; got {scale!r}")
        r = np.asarray(threshold, dtype=np.float64)
        if r.ndim == 1:
            if r.shape[0] != y.shape[0]:
                raise ValueError(f"threshold_weighted_crps: threshold has {r.shape[0]} values for "
                                 f"{y.shape[0]} forecasts; expected a scalar or one per forecast")
            r = r[:, None]
        elif r.ndim > 1:
            raise ValueError(f"threshold_weighted_crps: threshold must be a scalar or (n,); got {r.shape}")
        v = _chain(weight, side, r, float(scale))
        vy = _chain(weight, side, r[:, 0] if r.ndim == 2 else r, float(scale))(y)
    else:
        v = chain
        vy = chain(y)
    return crps_sorted(vy, v(x.astype(np.float64)))
