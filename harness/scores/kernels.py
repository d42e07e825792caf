"""Sorted-row kernels shared by every ensemble score, and the input checks of the public scores.

Each scoring rule in :mod:`harness.scores` is written twice: a readable public function (one rule
per call, e.g. :func:`harness.scores.crps.crps_sorted`) and the fused pass of
:func:`harness.scores.fused.score_all`, which sorts each chunk of rows once and hands the sorted
rows to the kernels below. The tests bind the two (every fused column equals its rule).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Literal

import numpy as np

from harness.scores.registry import (  # noqa: F401  (re-exported defaults)
    DEFAULT_COVERAGE_LEVELS,
    DEFAULT_DENSITY_FLOOR,
    DEFAULT_QUANTILE_LEVELS,
)

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
_CHUNK_BYTES = 64 * 2**20  # per (rows, m) float64 temporary in score_all


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


def _coverage_hits(y: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Hit indicators 1{lo <= y <= hi} per level (NaN where y or the interval is missing)."""
    yy = y[:, None]
    hit = ((lo <= yy) & (yy <= hi)).astype(np.float64)
    hit[np.isnan(yy[:, 0]) | np.isnan(lo[:, 0])] = np.nan
    return hit
