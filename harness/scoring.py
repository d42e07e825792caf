"""Scores of draw-based (ensemble) predictive distributions, and their aggregation.

Every per-forecast score takes ``obs`` of shape ``(n,)`` (NaN = truth not published: the score
is NaN) and ``draws`` of shape ``(n, m)`` (float32 or float64) and returns an array with one
row per forecast. Missing draws (NaN) are ignored, as properscoring does; a forecast whose draws
are all NaN (a failed task) scores NaN.

Conventions
-----------
* **CRPS** is the CRPS of the ensemble's empirical CDF,
  ``CRPS(F_m, y) = E|X - y| - E|X - X'| / 2`` (Gneiting & Raftery 2007), computed exactly.
* **Quantiles** of an ensemble default to numpy's ``"linear"`` estimator (Hyndman & Fan 1996,
  definition 7: the interpolated order statistic at position ``alpha * (m - 1)``); the
  ``"inverted_cdf"`` estimator (definition 1, the empirical CDF's left-continuous inverse) is
  available, and with it ``2 * integral of QS_alpha`` equals the ensemble CRPS exactly.
* **Quantile score** (pinball loss) ``QS_alpha(q, y) = (1{y < q} - alpha) * (q - y)`` so that
  ``CRPS = 2 * integral_0^1 QS_alpha d alpha`` (Gneiting & Ranjan 2011) and
  ``QS_0.5 = |q - y| / 2``.
* Lower is better for every score except ``pit`` and ``cover_*``, which describe calibration.

References
----------
Gneiting, T. and Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
estimation. Journal of the American Statistical Association 102(477), 359-378.
Gneiting, T. and Ranjan, R. (2011). Comparing density forecasts using threshold- and
quantile-weighted scoring rules. Journal of Business & Economic Statistics 29(3), 411-422.
Allen, S., Ginsbourger, D. and Ziegel, J. (2023). Evaluating forecasts for high-impact events
using transformed kernel scores. SIAM/ASA Journal on Uncertainty Quantification 11(3), 906-940.
Silverman, B. W. (1986). Density Estimation for Statistics and Data Analysis. Chapman & Hall.
Hyndman, R. J. and Fan, Y. (1996). Sample quantiles in statistical packages. The American
Statistician 50(4), 361-365.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Literal

import numpy as np
import pandas as pd
from scipy import special

from vintages import parse_periods

QuantileMethod = Literal["linear", "inverted_cdf"]
QUANTILE_METHODS: tuple[str, ...] = ("inverted_cdf", "linear")
QuantileWeight = Literal["centre", "left", "right", "tails", "uniform"]
TailSide = Literal["lower", "upper"]
TAIL_SIDES: tuple[str, ...] = ("lower", "upper")
TwWeight = Literal["indicator", "gaussian"]
TW_WEIGHTS: tuple[str, ...] = ("gaussian", "indicator")
Ties = Literal["mid", "random"]
TIES: tuple[str, ...] = ("mid", "random")

# Quantile weight functions of Gneiting & Ranjan (2011, Section 3), as published (unnormalised).
QUANTILE_WEIGHTS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "centre": lambda a: a * (1.0 - a),
    "left": lambda a: (1.0 - a) ** 2,
    "right": lambda a: a**2,
    "tails": lambda a: (2.0 * a - 1.0) ** 2,
    "uniform": lambda a: np.ones_like(a),
}
# The densities of a spread-out ensemble far below this are "the observation was impossible";
# flooring keeps one outlier from dominating a mean log score (score capped at -log(1e-10)).
DEFAULT_DENSITY_FLOOR = 1e-10
DEFAULT_QUANTILE_LEVELS = (0.05, 0.10, 0.25, 0.50, 0.75, 0.90, 0.95)
DEFAULT_COVERAGE_LEVELS = (0.5, 0.7, 0.9)
FULL = "full"
_SCORE_NAME = re.compile(
    r"^(crps(_[a-z0-9]+)?|twcrps(_[a-z0-9]+)?|log_score|[sa]e_(mean|median)|qs_\d\d|cover_\d\d|pit)$"
)
_PAIRS_LIMIT = 50_000_000  # elements of the all-pairs difference array (~400 MB)
_CHUNK_BYTES = 64 * 2**20  # per (rows, m) float64 temporary in score_all


# --------------------------------------------------------------------------- input checks


def _check(obs, draws, where: str) -> tuple[np.ndarray, np.ndarray]:
    """Validate (obs, draws) once at a public entry point; keep float32 draws as they are."""
    y = np.asarray(obs)
    x = np.asarray(draws)
    if y.ndim != 1:
        raise ValueError(f"{where}: obs must be 1-D with shape (n,); got shape {y.shape}")
    if x.ndim != 2:
        raise ValueError(f"{where}: draws must be 2-D with shape (n, m); got shape {x.shape}")
    if x.shape[0] != y.shape[0]:
        raise ValueError(f"{where}: obs has {y.shape[0]} rows but draws has {x.shape[0]}; "
                         "expected one row of draws per observation")
    if x.shape[1] < 1:
        raise ValueError(f"{where}: draws has no columns; expected at least one draw per forecast")
    if not np.issubdtype(y.dtype, np.number) or not np.issubdtype(x.dtype, np.number):
        raise ValueError(f"{where}: obs and draws must be numeric; got {y.dtype} and {x.dtype}")
    if x.dtype not in (np.float32, np.float64):
        x = x.astype(np.float64)
    return y.astype(np.float64, copy=False), x


def _check_levels(levels, where: str, name: str = "levels") -> np.ndarray:
    a = np.atleast_1d(np.asarray(levels, dtype=np.float64))
    if a.ndim != 1 or a.size == 0:
        raise ValueError(f"{where}: {name} must be a non-empty 1-D sequence; got {levels!r}")
    if not np.all((a > 0) & (a < 1)):
        raise ValueError(f"{where}: {name} must lie strictly between 0 and 1; got {a.tolist()}")
    return a


def _check_method(method: str, where: str) -> None:
    if method not in QUANTILE_METHODS:
        raise ValueError(f"{where}: unknown quantile method {method!r}; expected one of "
                         f"{sorted(QUANTILE_METHODS)}")


# --------------------------------------------------------------------------- sorted-row kernels


def _sort_rows(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool]:
    """Rows sorted ascending in float64 (NaN last), non-NaN counts, and whether no NaN exists."""
    s = np.sort(x, axis=1)
    if s.dtype != np.float64:
        s = s.astype(np.float64)
    m = s.shape[1]
    last_nan = np.isnan(s[:, -1])
    if not last_nan.any():
        return s, np.full(s.shape[0], m, dtype=np.int64), True
    k = m - np.isnan(s).sum(axis=1)
    return s, k.astype(np.int64), False


def _crps_from_sorted(s: np.ndarray, y: np.ndarray, k: np.ndarray, full: bool) -> np.ndarray:
    """Ensemble CRPS from sorted rows: mean |x - y| minus sum_i (2i - k - 1) x_(i) / k^2."""
    m = s.shape[1]
    if full:
        coef = 2.0 * np.arange(1, m + 1) - m - 1.0
        spread = s @ coef
        mae = np.abs(s - y[:, None]).sum(axis=1)
        with np.errstate(invalid="ignore"):
            return mae / m - spread / float(m) ** 2
    valid = np.arange(m)[None, :] < k[:, None]
    s0 = np.where(valid, s, 0.0)
    coef = np.where(valid, 2.0 * np.arange(1, m + 1)[None, :] - k[:, None] - 1.0, 0.0)
    spread = (s0 * coef).sum(axis=1)
    mae = np.where(valid, np.abs(s0 - y[:, None]), 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = mae / k - spread / k.astype(np.float64) ** 2
    out[k == 0] = np.nan
    return out


def _quantiles_from_sorted(s: np.ndarray, k: np.ndarray, levels: np.ndarray,
                           method: str) -> np.ndarray:
    """(n, L) ensemble quantiles from sorted rows with k valid values each (numpy's definitions)."""
    a = levels[None, :]
    kk = k[:, None]
    top = np.maximum(kk - 1, 0)
    if method == "linear":
        pos = a * (kk - 1)
        lo = np.clip(np.floor(pos).astype(np.int64), 0, top)
        hi = np.minimum(lo + 1, top)
        g = pos - lo
        qlo = np.take_along_axis(s, lo, axis=1)
        qhi = np.take_along_axis(s, hi, axis=1)
        # numpy's lerp, written from the nearer end so that g = 0 or 1 returns an order statistic
        q = np.where(g >= 0.5, qhi - (qhi - qlo) * (1.0 - g), qlo + (qhi - qlo) * g)
    else:
        # inverted CDF: smallest x_(i) with i/k >= alpha
        idx = np.clip(np.ceil(a * kk).astype(np.int64) - 1, 0, top)
        q = np.take_along_axis(s, idx, axis=1)
    q[k == 0] = np.nan
    return q


def _pinball(y: np.ndarray, q: np.ndarray, levels: np.ndarray) -> np.ndarray:
    yy = y[:, None]
    with np.errstate(invalid="ignore"):
        return ((yy < q).astype(np.float64) - levels[None, :]) * (q - yy)


def _midpoint_levels(n_levels: int) -> np.ndarray:
    return (np.arange(n_levels) + 0.5) / n_levels


def _weighted_from_quantiles(qs: np.ndarray, grid: np.ndarray, weight: str) -> np.ndarray:
    """2 * integral of QS_alpha w(alpha) by the midpoint rule on ``grid``."""
    w = QUANTILE_WEIGHTS[weight](grid)
    return 2.0 * (qs @ w) / grid.size


def _silverman(s: np.ndarray, k: np.ndarray, full: bool, mean: np.ndarray) -> np.ndarray:
    """Silverman's (1986, eq. 3.31) rule 0.9 min(sd, IQR/1.34) k^(-1/5); sd with ddof=1."""
    if full:
        ss = ((s - mean[:, None]) ** 2).sum(axis=1)
    else:
        valid = np.arange(s.shape[1])[None, :] < k[:, None]
        ss = np.where(valid, (np.where(valid, s, 0.0) - mean[:, None]) ** 2, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt(ss / np.maximum(k - 1, 1))
    q = _quantiles_from_sorted(s, k, np.array([0.25, 0.75]), "linear")
    iqr = (q[:, 1] - q[:, 0]) / 1.34
    spread = np.where((iqr > 0) & (iqr < sd), iqr, sd)  # IQR = 0 (heavy ties): fall back to sd
    with np.errstate(invalid="ignore", divide="ignore"):
        return 0.9 * spread * np.power(k.astype(np.float64), -0.2)


def _log_score_from_sorted(s: np.ndarray, y: np.ndarray, k: np.ndarray, full: bool,
                           h: np.ndarray, floor: float) -> np.ndarray:
    """-log of the Gaussian KDE at y, by a log-sum-exp around the nearest draw (no underflow)."""
    cap = -math.log(floor)
    ok = (h > 0) & np.isfinite(h) & (k > 0) & np.isfinite(y)
    hs = np.where(ok, h, 1.0)
    z2 = (s - y[:, None]) / hs[:, None]
    np.multiply(z2, z2, out=z2)
    z2 *= 0.5
    if not full:
        z2[np.isnan(z2)] = np.inf
    zmin = z2.min(axis=1)
    zmin = np.where(np.isfinite(zmin), zmin, 0.0)
    z2 -= zmin[:, None]
    np.negative(z2, out=z2)
    np.exp(z2, out=z2)
    total = z2.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_f = -zmin + np.log(total) - np.log(k * hs * math.sqrt(2.0 * math.pi))
    score = np.minimum(-log_f, cap)
    # zero spread: no density exists, the forecast gets the capped (worst) score
    score = np.where((h <= 0) & (k > 0) & np.isfinite(y), cap, score)
    score[~np.isfinite(y) | (k == 0)] = np.nan
    return score


def _pit_from_sorted(s: np.ndarray, y: np.ndarray, k: np.ndarray, ties: str,
                     rng: np.random.Generator | None) -> np.ndarray:
    yy = y[:, None]
    below = (s < yy).sum(axis=1)
    equal = (s <= yy).sum(axis=1) - below
    u = 0.5 if ties == "mid" else rng.random(y.shape[0])
    with np.errstate(invalid="ignore", divide="ignore"):
        out = (below + u * equal) / k
    out[~np.isfinite(y) | (k == 0)] = np.nan
    return out


def _mean_from_sorted(s: np.ndarray, k: np.ndarray, full: bool) -> np.ndarray:
    if full:
        return s.mean(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.isnan(s), 0.0, s).sum(axis=1) / np.where(k > 0, k, np.nan)


def _row_chunks(n: int, m: int, rows: int | None = None) -> list[slice]:
    step = rows or max(1, _CHUNK_BYTES // (8 * max(m, 1)))
    return [slice(i, min(i + step, n)) for i in range(0, n, step)]


# --------------------------------------------------------------------------- CRPS


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


# --------------------------------------------------------------------------- quantile scores


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


# --------------------------------------------------------------------------- other scores


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


def point_errors(obs, draws) -> dict[str, np.ndarray]:
    """Squared and absolute errors of the ensemble mean and median (numpy's linear median).

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)

    Returns
    -------
    dict with keys ``se_mean``, ``ae_mean``, ``se_median``, ``ae_median``; arrays of shape (n,).
    """
    y, x = _check(obs, draws, "point_errors")
    out = {key: np.empty(y.shape[0]) for key in ("se_mean", "ae_mean", "se_median", "ae_median")}
    for sl in _row_chunks(*x.shape):
        s, k, full = _sort_rows(x[sl])
        e_mean = _mean_from_sorted(s, k, full) - y[sl]
        e_med = _quantiles_from_sorted(s, k, np.array([0.5]), "linear")[:, 0] - y[sl]
        out["se_mean"][sl], out["ae_mean"][sl] = e_mean**2, np.abs(e_mean)
        out["se_median"][sl], out["ae_median"][sl] = e_med**2, np.abs(e_med)
    return out


def _coverage_from_q(y: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    yy = y[:, None]
    hit = ((lo <= yy) & (yy <= hi)).astype(np.float64)
    hit[np.isnan(yy[:, 0]) | np.isnan(lo[:, 0])] = np.nan
    return hit


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
        out[sl] = _coverage_from_q(y[sl], q[:, : c.size], q[:, c.size:])
    return out


def _level_names(prefix: str, levels: np.ndarray, where: str) -> list[str]:
    names = []
    for a in levels:
        pct = round(a * 100)
        if abs(a * 100 - pct) > 1e-9 or not 1 <= pct <= 99:
            raise ValueError(f"{where}: level {a!r} cannot be named {prefix}_NN; expected whole "
                             "percentages between 0.01 and 0.99")
        names.append(f"{prefix}_{pct:02d}")
    if len(set(names)) != len(names):
        raise ValueError(f"{where}: repeated levels {levels.tolist()}")
    return names


def score_all(obs, draws, *, quantile_levels=DEFAULT_QUANTILE_LEVELS,
              coverage_levels=DEFAULT_COVERAGE_LEVELS, n_levels: int = 99,
              method: QuantileMethod = "linear", density_floor: float = DEFAULT_DENSITY_FLOOR,
              chunk_rows: int | None = None, n_threads: int = 1) -> dict[str, np.ndarray]:
    """Every per-forecast score in one pass: each chunk of rows is sorted once and reused.

    Scores (exact names): ``crps``, ``crps_centre``, ``crps_tails``, ``crps_left``,
    ``crps_right`` (quantile-weighted, :func:`weighted_crps_quantile`), ``log_score``,
    ``se_mean``, ``ae_mean``, ``se_median``, ``ae_median``, ``qs_NN`` for each quantile level,
    ``cover_NN`` for each coverage level, ``pit`` (mid-rank ties).

    Memory is bounded by the chunk: a handful of ``(chunk_rows, m)`` float64 temporaries
    (about 64 MB each by default), plus the input itself.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m), float32 or float64
    quantile_levels : sequence of float
        Levels of the ``qs_NN`` scores (whole percentages).
    coverage_levels : sequence of float
        Nominal coverages of the ``cover_NN`` indicators (whole percentages).
    n_levels : int
        Midpoint nodes of the quantile-weighted CRPS integrals.
    method : {"inverted_cdf", "linear"}
        Quantile estimator of the quantile scores, weighted CRPS and intervals.
    density_floor : float
        Floor of the kernel density in the log score.
    chunk_rows : int, optional
        Rows per chunk (default: about 64 MB of float64 per temporary).
    n_threads : int
        Threads over chunks (numpy releases the GIL in sorts and ufuncs). Keep 1 inside
        process-parallel workers.

    Returns
    -------
    dict[str, ndarray]
        Each of shape (n,).

    References
    ----------
    See :func:`crps_sorted`, :func:`weighted_crps_quantile`, :func:`log_score`, :func:`pit`.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> out = score_all(rng.normal(size=3), rng.normal(size=(3, 500)))
    >>> sorted(out)[:4], out["crps"].shape
    (['ae_mean', 'ae_median', 'cover_50', 'cover_70'], (3,))
    """
    _check_method(method, "score_all")
    y, x = _check(obs, draws, "score_all")
    qlev = _check_levels(quantile_levels, "score_all", "quantile_levels")
    clev = _check_levels(coverage_levels, "score_all", "coverage_levels")
    qnames = _level_names("qs", qlev, "score_all")
    cnames = _level_names("cover", clev, "score_all")
    if not density_floor > 0:
        raise ValueError(f"score_all: density_floor must be positive; got {density_floor!r}")
    if int(n_levels) != n_levels or n_levels < 1:
        raise ValueError(f"score_all: n_levels must be a positive integer; got {n_levels!r}")
    if int(n_threads) != n_threads or n_threads < 1:
        raise ValueError(f"score_all: n_threads must be a positive integer; got {n_threads!r}")
    grid = _midpoint_levels(int(n_levels))
    ends = np.concatenate([(1 - clev) / 2, (1 + clev) / 2])
    levels = np.concatenate([qlev, ends, grid, [0.5]])
    iq = slice(0, qlev.size)
    ic = slice(qlev.size, qlev.size + ends.size)
    ig = slice(ic.stop, ic.stop + grid.size)
    names = (["crps", "crps_centre", "crps_tails", "crps_left", "crps_right", "log_score",
              "se_mean", "ae_mean", "se_median", "ae_median"] + qnames + cnames + ["pit"])
    n = y.shape[0]
    out = {name: np.empty(n) for name in names}

    def work(sl: slice) -> None:
        s, k, full = _sort_rows(x[sl])
        yy = y[sl]
        out["crps"][sl] = _crps_from_sorted(s, yy, k, full)
        q = _quantiles_from_sorted(s, k, levels, method)
        qs_grid = _pinball(yy, q[:, ig], grid)
        for wname in ("centre", "tails", "left", "right"):
            out[f"crps_{wname}"][sl] = _weighted_from_quantiles(qs_grid, grid, wname)
        qs = _pinball(yy, q[:, iq], qlev)
        for j, name in enumerate(qnames):
            out[name][sl] = qs[:, j]
        qc = q[:, ic]
        hits = _coverage_from_q(yy, qc[:, : clev.size], qc[:, clev.size:])
        for j, name in enumerate(cnames):
            out[name][sl] = hits[:, j]
        mean = _mean_from_sorted(s, k, full)
        e_mean = mean - yy
        median = q[:, -1] if method == "linear" else \
            _quantiles_from_sorted(s, k, np.array([0.5]), "linear")[:, 0]
        e_med = median - yy
        out["se_mean"][sl], out["ae_mean"][sl] = e_mean**2, np.abs(e_mean)
        out["se_median"][sl], out["ae_median"][sl] = e_med**2, np.abs(e_med)
        out["pit"][sl] = _pit_from_sorted(s, yy, k, "mid", None)
        h = _silverman(s, k, full, mean)
        out["log_score"][sl] = _log_score_from_sorted(s, yy, k, full, h, density_floor)

    chunks = _row_chunks(n, x.shape[1], chunk_rows)
    if n_threads == 1 or len(chunks) == 1:
        for sl in chunks:
            work(sl)
    else:
        with ThreadPoolExecutor(max_workers=int(n_threads)) as pool:
            list(pool.map(work, chunks))
    return out


# --------------------------------------------------------------------------- tidy frames


def tidy_scores(keys: pd.DataFrame, scores: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """Join per-forecast identifiers (one row per forecast) with :func:`score_all` output.

    Parameters
    ----------
    keys : DataFrame
        Columns such as model, variable, horizon, origin, target_period; n rows.
    scores : mapping of str to ndarray of shape (n,)

    Returns
    -------
    DataFrame
        ``keys`` with one column per score appended.
    """
    n = len(keys)
    bad = {name: np.shape(v) for name, v in scores.items() if np.shape(v) != (n,)}
    if bad:
        raise ValueError(f"tidy_scores: keys has {n} rows but score arrays have shapes {bad}; "
                         f"expected ({n},) each")
    clash = sorted(set(scores) & set(keys.columns))
    if clash:
        raise ValueError(f"tidy_scores: score names {clash} already are columns of keys")
    out = keys.reset_index(drop=True).copy()
    for name, v in scores.items():
        out[name] = np.asarray(v, dtype=np.float64)
    return out


def _score_columns(frame: pd.DataFrame, scores: Sequence[str] | None, where: str) -> list[str]:
    if scores is not None:
        missing = sorted(set(scores) - set(frame.columns))
        if missing:
            raise ValueError(f"{where}: score columns {missing} not in the frame; columns are "
                             f"{sorted(map(str, frame.columns))}")
        return list(scores)
    cols = [c for c in frame.columns if isinstance(c, str) and _SCORE_NAME.match(c)]
    if not cols:
        raise ValueError(f"{where}: no score columns found (names like crps, log_score, qs_05, "
                         f"cover_90, pit); columns are {sorted(map(str, frame.columns))}")
    return cols


def _freq_of(col: pd.Series) -> str | None:
    text = str(col.dtype)
    if text.startswith("period["):
        inner = text[len("period["):-1].upper()
        return "Q" if inner.startswith("Q") else "M" if inner.startswith("M") else ""
    return None


def _month_span(values, where: str) -> tuple[np.ndarray, np.ndarray]:
    """First and last month (months since 1970-01) of each period label or pandas Period."""
    col = pd.Series(values)
    freq = _freq_of(col)
    if freq is not None:
        if freq == "":
            raise ValueError(f"{where}: periods of dtype {col.dtype} are not supported; expected "
                             "quarterly or monthly periods")
        ords = col.array.asi8.astype(np.int64)
        bad = col.isna().to_numpy()
        f = np.full(len(col), freq)
    else:
        ords, f = parse_periods(col.to_numpy(dtype=object))
        bad = f == ""
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(f"{where}: row {i}: cannot read period {col.iloc[i]!r}; expected a "
                         "quarter like 2008Q2, a month like 2008-07, or a pandas Period")
    isq = f == "Q"
    first = np.where(isq, ords * 3, ords)
    last = np.where(isq, ords * 3 + 2, ords)
    return first, last


def assign_subperiods(frame: pd.DataFrame, periods: Mapping[str, tuple] | None = None,
                      regimes: pd.Series | None = None, *, full: bool = True,
                      column: str = "target_period") -> pd.DataFrame:
    """Label each forecast with the sub-periods its *target period* belongs to (long format).

    A forecast belongs to a named range ``(start, end)`` when its whole target period lies in
    ``[start of start, end of end]`` (so monthly targets work with quarterly ranges); it belongs
    to a regime by the regime of the period holding its target period's last month (see
    :func:`harness.chronology.regimes`). Sub-periods may overlap, so a forecast appears once per
    sub-period it belongs to, in a ``subperiod`` column (categorical, in the order full, ranges,
    regimes). Targets outside every range and regime appear only under ``"full"``.

    Parameters
    ----------
    frame : DataFrame
        One row per forecast with a target-period column (pandas Period or labels).
    periods : mapping of name to (start, end), optional
        Custom sub-periods, bounds as labels ("2008Q3", "2009-06") or pandas Periods.
    regimes : Series, optional
        Index: PeriodIndex (Q or M); values: regime names such as "recession"/"expansion".
    full : bool
        Include every row under ``"full"``.
    column : str
        Name of the target-period column.

    Returns
    -------
    DataFrame
        Rows of ``frame`` repeated per sub-period, with a ``subperiod`` column.

    Raises
    ------
    ValueError
        Missing column, unreadable period, a range with start after end, or a name clash.
    """
    if column not in frame.columns:
        raise ValueError(f"assign_subperiods: frame has no column {column!r}; columns are "
                         f"{sorted(map(str, frame.columns))}")
    first, last = _month_span(frame[column], f"assign_subperiods column {column!r}")
    masks: dict[str, np.ndarray] = {}
    if full:
        masks[FULL] = np.ones(len(frame), dtype=bool)
    for name, bounds in (periods or {}).items():
        if name in masks:
            raise ValueError(f"assign_subperiods: sub-period name {name!r} is used twice "
                             f"(reserved or taken: {sorted(masks)})")
        try:
            start, end = bounds
        except (TypeError, ValueError):
            raise ValueError(f"assign_subperiods: sub-period {name!r} must be (start, end); "
                             f"got {bounds!r}") from None
        (s0, _), (_, e1) = (_month_span([b], f"assign_subperiods sub-period {name!r}")
                            for b in (start, end))
        if s0[0] > e1[0]:
            raise ValueError(f"assign_subperiods: sub-period {name!r} starts ({start}) after it "
                             f"ends ({end})")
        masks[name] = (first >= s0[0]) & (last <= e1[0])
    if regimes is not None:
        freq = _freq_of(pd.Series(regimes.index)) if isinstance(regimes.index, pd.PeriodIndex) else None
        if freq not in ("Q", "M"):
            raise ValueError("assign_subperiods: regimes must be indexed by a quarterly or monthly "
                             f"PeriodIndex; got index of type {type(regimes.index).__name__}")
        key = last // 3 if freq == "Q" else last
        pos = pd.Index(regimes.index.asi8).get_indexer(key)
        labels = np.asarray(regimes.to_numpy(dtype=object))
        for name in sorted(pd.unique(labels.astype(str))):
            if name in masks:
                raise ValueError(f"assign_subperiods: regime {name!r} clashes with a sub-period "
                                 f"name {sorted(masks)}")
            hit = np.zeros(len(frame), dtype=bool)
            found = pos >= 0
            hit[found] = labels[pos[found]].astype(str) == name
            masks[name] = hit
    if not masks:
        raise ValueError("assign_subperiods: nothing to assign; give periods, regimes or full=True")
    return _expand(frame, masks)


def _expand(frame: pd.DataFrame, masks: Mapping[str, np.ndarray]) -> pd.DataFrame:
    parts, names = [], list(masks)
    for name, mask in masks.items():
        part = frame.loc[np.asarray(mask, dtype=bool)].copy()
        part["subperiod"] = name
        parts.append(part)
    out = pd.concat(parts, ignore_index=True)
    out["subperiod"] = pd.Categorical(out["subperiod"], categories=names, ordered=True)
    return out


def aggregate(scores: pd.DataFrame, by: Sequence[str] = ("model", "variable", "horizon"),
              subperiods: str | Mapping[str, pd.Series] | None = None, *,
              score_columns: Sequence[str] | None = None) -> pd.DataFrame:
    """Mean score per cell (sub-period × ``by``), with the number of forecasts behind each.

    A forecast is counted in ``n`` when at least one of its scores is present (missing truth or
    a failed task leaves all of them NaN); ``n_missing`` counts the others. Means skip NaN.

    Parameters
    ----------
    scores : DataFrame
        Tidy per-forecast scores (see :func:`tidy_scores`).
    by : sequence of str
        Cell keys besides the sub-period.
    subperiods : None, str or mapping of name to boolean Series
        None: use the frame's ``subperiod`` column if any (from :func:`assign_subperiods`), else
        everything is ``"full"``. A str: name of the column holding sub-period labels. A
        mapping: boolean masks aligned with ``scores.index``; ``"full"`` is added.
    score_columns : sequence of str, optional
        Columns to average (default: the columns named like scores).

    Returns
    -------
    DataFrame
        Columns ``subperiod``, ``*by``, ``n``, ``n_missing`` and one mean per score.

    Raises
    ------
    ValueError
        Missing columns or masks not aligned with the frame.
    """
    by = list(by)
    cols = _score_columns(scores, score_columns, "aggregate")
    missing = sorted(set(by) - set(scores.columns))
    if missing:
        raise ValueError(f"aggregate: group columns {missing} not in the frame; columns are "
                         f"{sorted(map(str, scores.columns))}")
    if isinstance(subperiods, Mapping):
        masks: dict[str, np.ndarray] = {FULL: np.ones(len(scores), dtype=bool)}
        for name, mask in subperiods.items():
            m = pd.Series(mask)
            if len(m) != len(scores) or not m.index.equals(scores.index):
                raise ValueError(f"aggregate: mask {name!r} is not aligned with the frame's index "
                                 f"({len(m)} vs {len(scores)} rows)")
            masks[str(name)] = m.fillna(False).to_numpy(dtype=bool)
        frame, key = _expand(scores, masks), "subperiod"
    elif isinstance(subperiods, str):
        if subperiods not in scores.columns:
            raise ValueError(f"aggregate: no sub-period column {subperiods!r}; columns are "
                             f"{sorted(map(str, scores.columns))}")
        frame, key = scores, subperiods
    elif subperiods is None:
        if "subperiod" in scores.columns:
            frame, key = scores, "subperiod"
        else:
            frame, key = scores.assign(subperiod=FULL), "subperiod"
    else:
        raise ValueError("aggregate: subperiods must be None, a column name or a mapping of "
                         f"boolean masks; got {type(subperiods).__name__}")
    present = frame[cols].notna().any(axis=1)
    work = frame[[key, *by, *cols]].copy()
    work["n"] = present.astype(np.int64)
    work["n_missing"] = (~present).astype(np.int64)
    grouped = work.groupby([key, *by], sort=True, observed=True, dropna=False)
    out = grouped[cols].mean()
    counts = grouped[["n", "n_missing"]].sum()
    out = counts.join(out).reset_index()
    if key != "subperiod":
        out = out.rename(columns={key: "subperiod"})
    return out


def common_sample(scores: pd.DataFrame,
                  keys: Sequence[str] = ("variable", "horizon", "origin", "target_period"), *,
                  score_columns: Sequence[str] | None = None) -> pd.DataFrame:
    """Keep only the forecasts scored for every model, so that cell means compare like with like.

    A forecast (one value of ``keys``) is kept when every model in the frame has a row for it
    with at least one score present; a failed task or a missing truth for one model removes
    that target for all models.

    Parameters
    ----------
    scores : DataFrame
        Tidy per-forecast scores with a ``model`` column.
    keys : sequence of str
        Columns identifying the same forecast target across models.
    score_columns : sequence of str, optional

    Returns
    -------
    DataFrame
        The rows of ``scores`` on the common sample.
    """
    cols = _score_columns(scores, score_columns, "common_sample")
    need = ["model", *keys]
    missing = sorted(set(need) - set(scores.columns))
    if missing:
        raise ValueError(f"common_sample: columns {missing} not in the frame; columns are "
                         f"{sorted(map(str, scores.columns))}")
    present = scores[cols].notna().any(axis=1)
    n_models = scores["model"].nunique()
    scored = scores.loc[present, need].drop_duplicates()
    per_key = scored.groupby(list(keys), observed=True, dropna=False)["model"].nunique()
    full_keys = per_key[per_key == n_models].index
    idx = pd.MultiIndex.from_frame(scores[list(keys)]) if len(keys) > 1 else pd.Index(scores[keys[0]])
    return scores.loc[idx.isin(full_keys) & present.to_numpy()]


def _loss_columns(frame: pd.DataFrame) -> list[str]:
    return [c for c in frame.columns if isinstance(c, str) and _SCORE_NAME.match(c)
            and c != "pit" and not c.startswith("cover_")]


def _cell_keys(agg: pd.DataFrame) -> list[str]:
    score_like = {c for c in agg.columns if isinstance(c, str) and _SCORE_NAME.match(c)}
    skip = {"model", "n", "n_missing", "log_score_diff"}
    return [c for c in agg.columns if c not in score_like and c not in skip]


def relative_to(agg: pd.DataFrame, benchmark: str) -> pd.DataFrame:
    """Loss-type scores of each model relative to a benchmark model in the same cell.

    Ratios ``score / benchmark score`` (below 1 = better than the benchmark) for the CRPS
    family, quantile scores and point errors; the log score, which can be negative, becomes a
    difference ``log_score_diff`` (below 0 = better). PIT and coverage are left out.

    Parameters
    ----------
    agg : DataFrame
        Output of :func:`aggregate` (needs a ``model`` column).
    benchmark : str
        Name of the benchmark model.

    Returns
    -------
    DataFrame
        Cell keys, ``model``, ``n`` and the relative scores.

    Raises
    ------
    ValueError
        No ``model`` column or unknown benchmark (the known models are listed).
    """
    if "model" not in agg.columns:
        raise ValueError("relative_to: the aggregate has no 'model' column; aggregate by model")
    models = sorted(map(str, pd.unique(agg["model"])))
    if benchmark not in models:
        raise ValueError(f"relative_to: unknown benchmark {benchmark!r}; models are {models}")
    keys = _cell_keys(agg)
    losses = _loss_columns(agg)
    bench = agg.loc[agg["model"] == benchmark, keys + losses]
    merged = agg[keys + ["model", "n"] + losses].merge(bench, on=keys, how="left",
                                                       suffixes=("", "__bench"))
    out = merged[keys + ["model", "n"]].copy()
    for c in losses:
        if c == "log_score":
            out["log_score_diff"] = merged[c] - merged[c + "__bench"]
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                out[c] = merged[c] / merged[c + "__bench"]
    return out


def best_per_column(agg: pd.DataFrame) -> pd.DataFrame:
    """Mark, in each cell, the model(s) with the best value of each score (ties all marked).

    Best is the minimum for loss-type scores (and for ``log_score_diff`` of
    :func:`relative_to`), and the smallest distance to the nominal rate for ``cover_NN``.

    Parameters
    ----------
    agg : DataFrame
        Output of :func:`aggregate` or :func:`relative_to`.

    Returns
    -------
    DataFrame
        Cell keys, ``model`` and one boolean column per score.
    """
    if "model" not in agg.columns:
        raise ValueError("best_per_column: the frame has no 'model' column")
    keys = _cell_keys(agg)
    cols = [c for c in agg.columns if isinstance(c, str)
            and (c == "log_score_diff" or (_SCORE_NAME.match(c) and c != "pit"))]
    value = agg[cols].copy()
    for c in cols:
        if c.startswith("cover_"):
            value[c] = (agg[c] - int(c[-2:]) / 100.0).abs()
    if keys:
        best = value.groupby([agg[k] for k in keys], observed=True, dropna=False).transform("min")
    else:  # a single cell
        best = pd.DataFrame({c: np.full(len(value), value[c].min()) for c in cols}, index=value.index)
    out = agg[keys + ["model"]].copy()
    for c in cols:
        out[c] = (value[c] == best[c]).to_numpy() & value[c].notna().to_numpy()
    return out
