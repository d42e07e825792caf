"""Forecast comparison and calibration tests on per-forecast losses, hits and PITs.

Every test drops missing values first (pairs with a NaN on either side for comparisons) and
says so in its result's ``n``. Degenerate data (too few observations, a constant loss
differential) give NaN statistics with a ``note`` instead of an exception, so a loop over many
cells keeps going; invalid arguments raise ``ValueError``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd
from scipy import optimize, special, stats

from vintages import KERNELS, Kernel, long_run_variance

Alternative = Literal["two-sided", "less", "greater"]
ALTERNATIVES: tuple[str, ...] = ("greater", "less", "two-sided")
Bootstrap = Literal["stationary", "moving_block", "circular"]
BOOTSTRAPS: tuple[str, ...] = ("circular", "moving_block", "stationary")
MCSStatistic = Literal["Tmax", "TR"]
MCS_STATISTICS: tuple[str, ...] = ("TR", "Tmax")

# Giacomini & Rossi (2010, Journal of Applied Econometrics 25(4), Table I): two-sided critical
# values k_alpha of the Fluctuation test, by window share mu. Typed from memory; the test suite
# checks them against simulate_fluctuation_cv.
FLUCTUATION_CV: dict[float, dict[float, float]] = {
    0.05: {0.1: 3.393, 0.2: 3.179, 0.3: 3.012, 0.4: 2.890, 0.5: 2.779,
           0.6: 2.634, 0.7: 2.560, 0.8: 2.433, 0.9: 2.248},
    0.10: {0.1: 3.170, 0.2: 2.948, 0.3: 2.766, 0.4: 2.626, 0.5: 2.500,
           0.6: 2.356, 0.7: 2.252, 0.8: 2.130, 0.9: 1.950},
}
# Asymptotic critical values of the Kolmogorov-Smirnov (sup |Brownian bridge|) and
# Cramer-von Mises (integral of the squared bridge) statistics, used by Rossi & Sekhposyan
# (2019) for one-step-ahead PITs. From memory (Smirnov 1948; Anderson & Darling 1952); the
# test suite checks them against scipy's Kolmogorov distribution and our CvM limit CDF.
KS_CV: dict[float, float] = {0.01: 1.6276, 0.05: 1.3581, 0.10: 1.2238}
CVM_CV: dict[float, float] = {0.01: 0.7435, 0.05: 0.4614, 0.10: 0.3473}


def _pairs(a, b, where: str) -> tuple[np.ndarray, int]:
    x = np.asarray(a, dtype=np.float64).ravel()
    y = np.asarray(b, dtype=np.float64).ravel()
    if x.shape != y.shape:
        raise ValueError(f"{where}: loss_a has {x.size} values and loss_b {y.size}; expected the "
                         "same forecasts in the same order")
    keep = ~(np.isnan(x) | np.isnan(y))
    return x[keep] - y[keep], int((~keep).sum())


def _check_choice(value: str, options: tuple[str, ...], name: str, where: str) -> None:
    if value not in options:
        raise ValueError(f"{where}: unknown {name} {value!r}; expected one of {sorted(options)}")


def _check_int(value, name: str, where: str, minimum: int) -> int:
    if isinstance(value, bool) or int(value) != value or value < minimum:
        raise ValueError(f"{where}: {name} must be an integer >= {minimum}; got {value!r}")
    return int(value)


def _pvalue(stat: float, dist, alternative: str) -> float:
    if alternative == "two-sided":
        return float(2.0 * dist.sf(abs(stat)))
    if alternative == "less":
        return float(dist.cdf(stat))
    return float(dist.sf(stat))


@dataclass(frozen=True)
class DMResult:
    """Result of :func:`diebold_mariano`.

    ``stat`` is the (HLN-corrected, if asked) statistic, ``pvalue`` its p-value, ``mean_diff``
    the mean of loss_a - loss_b, ``n`` the pairs used, ``n_dropped`` pairs dropped for NaN,
    ``kernel`` the long-run variance weights actually used, ``note`` why a NaN was returned.
    """

    stat: float
    pvalue: float
    mean_diff: float
    n: int
    h: int
    hln: bool
    kernel: str
    alternative: str
    n_dropped: int = 0
    note: str = ""


def hln_factor(n: int, h: int) -> float:
    """Harvey-Leybourne-Newbold small-sample factor sqrt((T + 1 - 2h + h(h - 1)/T) / T).

    Parameters
    ----------
    n : int
        Number of forecast pairs T.
    h : int
        Forecast horizon (>= 1).

    Returns
    -------
    float
        NaN when the expression under the root is not positive.

    References
    ----------
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13(2), 281-291.
    """
    val = (n + 1 - 2 * h + h * (h - 1) / n) / n
    return math.sqrt(val) if val > 0 else float("nan")


def diebold_mariano(loss_a, loss_b, h: int = 1, *, hln: bool = True,
                    kernel: Kernel = "rectangular",
                    alternative: Alternative = "two-sided") -> DMResult:
    """Diebold-Mariano test of equal expected loss, with the HLN small-sample correction.

    ``d_t = loss_a - loss_b``; ``DM = mean(d) / sqrt(V / T)`` with V the long-run variance of d
    with ``h - 1`` lags. The default rectangular kernel is the original DM (1995) and HLN (1997)
    choice (an h-step forecast error is at most MA(h-1)); when it gives V <= 0 the Bartlett
    (Newey-West) weights with the same lags are used instead and ``kernel`` says so. With
    ``hln=True`` the statistic is multiplied by :func:`hln_factor` and compared with Student-t
    (T - 1), otherwise with N(0, 1).

    Parameters
    ----------
    loss_a, loss_b : array_like, shape (T,)
        Losses of the two forecasts for the same targets, in time order.
    h : int
        Forecast horizon (>= 1); h = 0 nowcasts use h = 1.
    hln : bool
        Apply the Harvey-Leybourne-Newbold correction.
    kernel : {"bartlett", "rectangular"}
    alternative : {"greater", "less", "two-sided"}
        "less": forecast a has lower expected loss; "greater": higher.

    Returns
    -------
    DMResult

    Raises
    ------
    ValueError
        Different lengths, h < 1, unknown kernel or alternative.

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business
    & Economic Statistics 13(3), 253-263.
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13(2), 281-291.

    Examples
    --------
    >>> res = diebold_mariano([1.0, 2.0, 0.5, 1.5, 2.5], [1.2, 2.6, 0.9, 1.4, 3.1], h=1)
    >>> round(res.stat, 3), res.n
    (-2.563, 5)
    """
    where = "diebold_mariano"
    h = _check_int(h, "h", where, 1)
    _check_choice(kernel, KERNELS, "kernel", where)
    _check_choice(alternative, ALTERNATIVES, "alternative", where)
    d, dropped = _pairs(loss_a, loss_b, where)
    t = d.size

    def empty(note: str, mean: float = float("nan"), used: str = kernel) -> DMResult:
        return DMResult(float("nan"), float("nan"), mean, t, h, hln, used, alternative, dropped, note)

    if t < 2:
        return empty(f"only {t} complete pair(s) of losses; at least 2 are needed")
    mean = float(d.mean())
    used = kernel
    v = long_run_variance(d, h - 1, kernel)
    if not v > 0 and kernel == "rectangular":
        used = "bartlett (fallback: rectangular variance not positive)"
        v = long_run_variance(d, h - 1, "bartlett")
    if not v > 0:
        return empty("the loss differential is constant (zero variance); the test is undefined",
                     mean, used)
    stat = mean / math.sqrt(v / t)
    if hln:
        factor = hln_factor(t, h)
        if not np.isfinite(factor):
            return empty(f"T = {t} is too small for the HLN correction at h = {h}", mean, used)
        stat *= factor
        dist = stats.t(df=t - 1)
    else:
        dist = stats.norm()
    return DMResult(float(stat), _pvalue(stat, dist, alternative), mean, t, h, hln, used,
                    alternative, dropped)


# --------------------------------------------------------------------------- fluctuation test


def simulate_fluctuation_cv(mu: float | Sequence[float], alpha: float | Sequence[float] = 0.05,
                            n_sim: int = 20_000, n_grid: int = 500, seed: int = 0, *,
                            two_sided: bool = True) -> float | np.ndarray:
    """Simulate critical values of sup_t |B(t) - B(t - mu)| / sqrt(mu), t in [mu, 1].

    B is approximated by partial sums of ``n_grid`` N(0, 1/n_grid) steps; the same paths serve
    every mu. A finite grid slightly understates the supremum of the continuous process.

    Parameters
    ----------
    mu : float or sequence of float in (0, 1]
        Window share(s).
    alpha : float or sequence of float in (0, 1)
        Test size(s); the (1 - alpha) quantile is returned.
    n_sim : int
        Simulated paths.
    n_grid : int
        Steps per path.
    seed : int
        Seed of ``numpy.random.default_rng``.
    two_sided : bool
        Use |.| (two-sided) or the signed supremum (one-sided).

    Returns
    -------
    float or ndarray
        Shape ``(len(mu), len(alpha))`` with the scalar axes dropped (a float when both are
        scalars).

    References
    ----------
    Giacomini, R. and Rossi, B. (2010). Forecast comparisons in unstable environments. Journal
    of Applied Econometrics 25(4), 595-620 (the limiting functional, Proposition 1).
    """
    where = "simulate_fluctuation_cv"
    mus = np.atleast_1d(np.asarray(mu, dtype=np.float64))
    if not np.all((mus > 0) & (mus <= 1)):
        raise ValueError(f"{where}: mu must lie in (0, 1]; got {mus.tolist()}")
    alphas = np.atleast_1d(np.asarray(alpha, dtype=np.float64))
    if not np.all((alphas > 0) & (alphas < 1)):
        raise ValueError(f"{where}: alpha must lie in (0, 1); got {alphas.tolist()}")
    n_sim = _check_int(n_sim, "n_sim", where, 1)
    n_grid = _check_int(n_grid, "n_grid", where, 2)
    win = np.maximum(np.rint(mus * n_grid).astype(np.int64), 1)
    rng = np.random.default_rng(seed)
    sups = np.empty((mus.size, n_sim))
    step = max(1, 8_000_000 // n_grid)
    for s0 in range(0, n_sim, step):
        k = min(step, n_sim - s0)
        b = np.zeros((k, n_grid + 1))
        np.cumsum(rng.standard_normal((k, n_grid)) / math.sqrt(n_grid), axis=1, out=b[:, 1:])
        for i, w in enumerate(win):
            inc = (b[:, w:] - b[:, : n_grid + 1 - w]) / math.sqrt(mus[i])
            sups[i, s0:s0 + k] = (np.abs(inc) if two_sided else inc).max(axis=1)
    cv = np.quantile(sups, 1 - alphas, axis=1).T  # (n_mu, n_alpha)
    if np.ndim(alpha) == 0:
        cv = cv[:, 0]
    if np.ndim(mu) == 0:
        cv = cv[0]
    return float(cv) if np.ndim(cv) == 0 else cv


@dataclass(frozen=True)
class FluctuationResult:
    """Result of :func:`fluctuation_test`.

    ``path[j]`` is the standardised DM statistic of the window ending at complete pair
    ``window_end[j]`` (0-based, after dropping NaN pairs); ``stat = max |path|``.
    """

    path: np.ndarray
    window_end: np.ndarray
    stat: float
    critical_value: float
    reject: bool
    mu: float
    alpha: float
    window: int
    n: int
    sigma: float
    note: str = ""
    extra: dict = field(default_factory=dict)


def fluctuation_test(loss_a, loss_b, mu: float = 0.3, alpha: float = 0.05, *, h: int = 1,
                     kernel: Kernel = "rectangular", critical: Literal["table", "simulate"] = "table",
                     n_sim: int = 20_000, n_grid: int = 500, seed: int = 0) -> FluctuationResult:
    """Giacomini-Rossi Fluctuation test: rolling-window DM statistics against a sup bound.

    With P complete pairs and window ``m = round(mu P)``, the path is
    ``F_t = sum_{window ending at t} d_j / (sqrt(m) sigma)`` where sigma^2 is the long-run
    variance of d on the full sample (same estimator as :func:`diebold_mariano`: ``h - 1``
    lags, rectangular weights with a Bartlett fallback). At mu = 1 the single path value is the
    DM statistic without the HLN correction. Equal accuracy at every point is rejected when
    ``max |F_t|`` exceeds the two-sided critical value.

    Parameters
    ----------
    loss_a, loss_b : array_like, shape (P,)
    mu : float
        Window share m/P; the table covers 0.1, 0.2, ..., 0.9.
    alpha : float
        0.05 or 0.10 with the table; any value in (0, 1) with ``critical="simulate"``.
    h : int
        Forecast horizon (lags of the long-run variance: h - 1).
    kernel : {"bartlett", "rectangular"}
    critical : {"simulate", "table"}
        Giacomini & Rossi's Table I, or :func:`simulate_fluctuation_cv`.
    n_sim, n_grid, seed : int
        Passed to :func:`simulate_fluctuation_cv`.

    Returns
    -------
    FluctuationResult

    Raises
    ------
    ValueError
        mu or alpha not tabulated (with ``critical="table"``), bad lengths or options.

    References
    ----------
    Giacomini, R. and Rossi, B. (2010). Forecast comparisons in unstable environments. Journal
    of Applied Econometrics 25(4), 595-620.
    """
    where = "fluctuation_test"
    _check_choice(critical, ("simulate", "table"), "critical", where)
    _check_choice(kernel, KERNELS, "kernel", where)
    h = _check_int(h, "h", where, 1)
    if not 0 < mu <= 1:
        raise ValueError(f"{where}: mu must lie in (0, 1]; got {mu!r}")
    if critical == "table":
        if alpha not in FLUCTUATION_CV:
            raise ValueError(f"{where}: no tabulated critical values for alpha={alpha!r}; expected "
                             f"one of {sorted(FLUCTUATION_CV)} or critical='simulate'")
        table = FLUCTUATION_CV[alpha]
        key = next((k for k in table if abs(k - mu) < 1e-9), None)
        if key is None:
            raise ValueError(f"{where}: no tabulated critical value for mu={mu!r}; expected one of "
                             f"{sorted(table)} or critical='simulate'")
        cv = table[key]
    else:
        cv = simulate_fluctuation_cv(mu, alpha, n_sim, n_grid, seed)
    d, dropped = _pairs(loss_a, loss_b, where)
    p = d.size
    m = int(round(mu * p))
    nan = np.array([])
    if m < 2:
        return FluctuationResult(nan, nan.astype(np.int64), float("nan"), cv, False, mu, alpha,
                                 m, p, float("nan"), f"window of {m} pair(s) is too short (P = {p})")
    v = long_run_variance(d, h - 1, kernel)
    if not v > 0:
        v = long_run_variance(d, h - 1, "bartlett")
    if not v > 0:
        return FluctuationResult(nan, nan.astype(np.int64), float("nan"), cv, False, mu, alpha,
                                 m, p, 0.0, "the loss differential is constant (zero variance)")
    sigma = math.sqrt(v)
    c = np.concatenate([[0.0], np.cumsum(d)])
    path = (c[m:] - c[:-m]) / (math.sqrt(m) * sigma)
    stat = float(np.max(np.abs(path)))
    return FluctuationResult(path, np.arange(m - 1, p), stat, float(cv), bool(stat > cv), mu,
                             alpha, m, p, sigma, extra={"n_dropped": dropped})


# --------------------------------------------------------------------------- bootstrap & MCS


def bootstrap_indices(n: int, n_boot: int, block_len: float, method: Bootstrap = "stationary",
                      seed: int | np.random.Generator = 0) -> np.ndarray:
    """Time indices of block-bootstrap resamples, all drawn at once.

    ``stationary``: blocks of geometric length with mean ``block_len``, wrapping around
    (Politis & Romano 1994); ``circular``: fixed-length blocks with any start, wrapping;
    ``moving_block``: fixed-length blocks starting in ``[0, n - block_len]`` (Kunsch 1989).

    Parameters
    ----------
    n : int
        Series length.
    n_boot : int
        Number of resamples.
    block_len : float
        (Mean) block length, >= 1.
    method : {"circular", "moving_block", "stationary"}
    seed : int or numpy Generator

    Returns
    -------
    ndarray of int64, shape (n_boot, n)

    References
    ----------
    Politis, D. N. and Romano, J. P. (1994). The stationary bootstrap. JASA 89(428), 1303-1313.
    Kunsch, H. R. (1989). The jackknife and the bootstrap for general stationary observations.
    Annals of Statistics 17(3), 1217-1241.
    """
    where = "bootstrap_indices"
    _check_choice(method, BOOTSTRAPS, "method", where)
    n = _check_int(n, "n", where, 1)
    n_boot = _check_int(n_boot, "n_boot", where, 1)
    if not block_len >= 1:
        raise ValueError(f"{where}: block_len must be >= 1; got {block_len!r}")
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    if method == "stationary":
        starts = rng.integers(0, n, size=(n_boot, n))
        new = rng.random((n_boot, n)) < 1.0 / block_len
        new[:, 0] = True
        pos = np.arange(n)
        begin = np.maximum.accumulate(np.where(new, pos, 0), axis=1)
        first = np.take_along_axis(starts, begin, axis=1)
        return (first + pos - begin) % n
    length = int(round(block_len))
    if method == "moving_block" and length > n:
        raise ValueError(f"{where}: block_len {length} exceeds the series length {n}")
    n_blocks = -(-n // length)
    high = n - length + 1 if method == "moving_block" else n
    starts = rng.integers(0, high, size=(n_boot, n_blocks))
    idx = (starts[:, :, None] + np.arange(length)[None, None, :]).reshape(n_boot, -1)[:, :n]
    return idx % n


def _boot_means(x: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Means of x (T, k) over each resample, via counts (B, T) @ x: no (B, T, k) array."""
    b, t = idx.shape
    counts = np.bincount((idx + (np.arange(b) * t)[:, None]).ravel(), minlength=b * t)
    return counts.reshape(b, t).astype(np.float64) @ x / t


@dataclass(frozen=True)
class MCSResult:
    """Result of :func:`model_confidence_set`.

    ``pvalues`` are MCS p-values in the input column order; ``included`` / ``excluded`` hold
    column labels (names of a DataFrame's columns, else positions); ``eliminated`` lists the
    labels in elimination order (the surviving model last).
    """

    included: list
    excluded: list
    pvalues: np.ndarray
    eliminated: list
    statistic: str
    alpha: float
    n: int
    n_dropped: int


def _mcs_pvalues(losses: np.ndarray, idx: np.ndarray, statistic: str) -> tuple[np.ndarray, list[int]]:
    """MCS p-values given the bootstrap resamples; follows HLN (2011), section 3."""
    t, k = losses.shape
    mean = losses.mean(axis=0)
    boot = _boot_means(losses, idx) - mean  # centred bootstrap means, (B, k)
    included = np.ones(k, dtype=bool)
    order: list[int] = []
    step_p: list[float] = []
    if statistic == "TR":
        dbar = mean[:, None] - mean[None, :]
        dstar = boot[:, :, None] - boot[:, None, :]
        var = (dstar**2).mean(axis=0)
        # d_ii = 0, and identical models have d_ij = 0 in every resample: t = 0, not 0/0
        var[var == 0] = 1.0
        sd = np.sqrt(var)
        tij = dbar / sd
        tstar = dstar / sd
        while included.sum() > 1:
            ids = np.flatnonzero(included)
            sub = tij[np.ix_(ids, ids)]
            stat = sub.max()
            sim = tstar[:, ids][:, :, ids].reshape(idx.shape[0], -1).max(axis=1)
            if stat <= 0 and np.all(sim <= 0):
                break  # the remaining models are identical: nothing left to eliminate
            i = np.unravel_index(np.argmax(sub), sub.shape)[0]
            order.append(int(ids[i]))
            step_p.append(float((stat < sim).mean()))
            included[ids[i]] = False
    else:
        while included.sum() > 1:
            ids = np.flatnonzero(included)
            z = boot[:, ids] - boot[:, ids].mean(axis=1, keepdims=True)
            sd = np.sqrt((z**2).mean(axis=0))
            sd[sd == 0] = 1.0  # a model equal to the set's average in every resample: t = 0
            sim = (z / sd).max(axis=1)
            ti = (mean[ids] - mean[ids].mean()) / sd
            stat = ti.max()
            if stat <= 0 and np.all(sim <= 0):
                break  # the remaining models are identical: nothing left to eliminate
            worst = ids[ti == stat]
            p = float((stat < sim).mean())
            for i in worst:
                order.append(int(i))
                step_p.append(p)
            included[worst] = False
    order.extend(int(i) for i in np.flatnonzero(included))
    step_p.extend([1.0] * int(included.sum()))
    mcs_p = np.maximum.accumulate(np.asarray(step_p))
    pvalues = np.empty(k)
    pvalues[order] = mcs_p
    return pvalues, order


def model_confidence_set(losses, alpha: float = 0.10, block_len: float | None = None,
                         n_boot: int = 1000, seed: int = 0, statistic: MCSStatistic = "Tmax", *,
                         bootstrap: Bootstrap = "stationary") -> MCSResult:
    """Model confidence set of Hansen, Lunde & Nason (2011) by block bootstrap.

    All bootstrap means come from one ``(n_boot, T)`` index array (:func:`bootstrap_indices`),
    reused at every elimination step as the method prescribes. ``statistic="Tmax"`` tests with
    ``max_i t_i.`` (loss of i against the average of the set) and eliminates its argmax;
    ``"TR"`` uses ``max_ij t_ij`` and eliminates the worse model of the maximising pair.
    Variances are bootstrap variances. MCS p-values are running maxima of the step p-values;
    the set at level 1 - alpha holds the models with p-value >= alpha (HLN's definition;
    ``arch.bootstrap.MCS`` uses >).

    Parameters
    ----------
    losses : array_like or DataFrame, shape (T, k)
        Losses of k models on the same T targets; rows with any NaN are dropped.
    alpha : float
        Size: the set is a 1 - alpha confidence set.
    block_len : float, optional
        (Mean) block length; default ``ceil(T ** (1/3))`` (common practice).
    n_boot : int
    seed : int
    statistic : {"TR", "Tmax"}
    bootstrap : {"circular", "moving_block", "stationary"}

    Returns
    -------
    MCSResult

    Raises
    ------
    ValueError
        Fewer than two models, bad options.

    Notes
    -----
    When the models left in the set have identical losses the elimination stops and they all
    keep the p-value reached so far (at least the p-value 1 of the last survivor).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> losses = rng.normal(size=(200, 3)) + [0.0, 0.0, 1.0]
    >>> model_confidence_set(losses, 0.1, block_len=4, n_boot=500).excluded
    [2]

    References
    ----------
    Hansen, P. R., Lunde, A. and Nason, J. M. (2011). The model confidence set. Econometrica
    79(2), 453-497.
    """
    where = "model_confidence_set"
    _check_choice(statistic, MCS_STATISTICS, "statistic", where)
    _check_choice(bootstrap, BOOTSTRAPS, "bootstrap", where)
    if not 0 < alpha < 1:
        raise ValueError(f"{where}: alpha must lie in (0, 1); got {alpha!r}")
    labels = list(losses.columns) if isinstance(losses, pd.DataFrame) else None
    x = np.asarray(losses, dtype=np.float64)
    if x.ndim != 2 or x.shape[1] < 2:
        raise ValueError(f"{where}: losses must be (T, k) with k >= 2 models; got shape {x.shape}")
    keep = ~np.isnan(x).any(axis=1)
    x = x[keep]
    t, k = x.shape
    if t < 2:
        raise ValueError(f"{where}: only {t} complete row(s) of losses; need at least 2")
    labels = labels or list(range(k))
    bl = float(math.ceil(t ** (1 / 3))) if block_len is None else block_len
    idx = bootstrap_indices(t, n_boot, bl, bootstrap, seed)
    pvalues, order = _mcs_pvalues(x, idx, statistic)
    inc = [labels[i] for i in range(k) if pvalues[i] >= alpha]
    exc = [labels[i] for i in range(k) if pvalues[i] < alpha]
    return MCSResult(inc, exc, pvalues, [labels[i] for i in order], statistic, alpha, t,
                     int((~keep).sum()))


# --------------------------------------------------------------------------- interval coverage


@dataclass(frozen=True)
class CoverageResult:
    """Result of :func:`kupiec` (``lr_uc`` only) or :func:`christoffersen` (all three LRs).

    ``counts`` holds n0/n1 (misses/hits) and, for Christoffersen, the transitions n00..n11.
    """

    lr_uc: float
    p_uc: float
    n: int
    hit_rate: float
    coverage: float
    lr_ind: float = float("nan")
    p_ind: float = float("nan")
    lr_cc: float = float("nan")
    p_cc: float = float("nan")
    counts: dict = field(default_factory=dict)


def _hits(hits, coverage: float, where: str) -> np.ndarray:
    if not 0 < coverage < 1:
        raise ValueError(f"{where}: coverage must lie in (0, 1); got {coverage!r}")
    x = np.asarray(hits, dtype=np.float64).ravel()
    bad = ~np.isnan(x) & (x != 0) & (x != 1)
    if bad.any():
        raise ValueError(f"{where}: hits must be 0, 1 or NaN; got {x[bad][0]!r} at position "
                         f"{int(np.flatnonzero(bad)[0])}")
    return x


def _lr_uc(n1: float, n0: float, c: float) -> float:
    n = n0 + n1
    pi = n1 / n
    ll_null = special.xlogy(n1, c) + special.xlogy(n0, 1 - c)
    ll_alt = special.xlogy(n1, pi) + special.xlogy(n0, 1 - pi)
    return float(-2.0 * (ll_null - ll_alt))


def kupiec(hits, coverage: float) -> CoverageResult:
    """Kupiec's unconditional coverage likelihood-ratio test, chi-squared(1).

    ``LR_uc = -2 [n1 log c + n0 log(1 - c) - n1 log pi - n0 log(1 - pi)]`` with ``pi = n1/n``
    and 0 log 0 = 0.

    Parameters
    ----------
    hits : array_like of {0, 1, NaN}, shape (T,)
        1 when the observation fell inside the interval; NaN (missing) is dropped.
    coverage : float
        Nominal probability of a hit.

    Returns
    -------
    CoverageResult

    References
    ----------
    Kupiec, P. H. (1995). Techniques for verifying the accuracy of risk measurement models.
    Journal of Derivatives 3(2), 73-84.
    """
    x = _hits(hits, coverage, "kupiec")
    x = x[~np.isnan(x)]
    n = x.size
    if n == 0:
        return CoverageResult(float("nan"), float("nan"), 0, float("nan"), coverage)
    n1 = float(x.sum())
    n0 = n - n1
    lr = _lr_uc(n1, n0, coverage)
    return CoverageResult(lr, float(stats.chi2.sf(lr, 1)), n, n1 / n, coverage,
                          counts={"n0": int(n0), "n1": int(n1)})


def christoffersen(hits, coverage: float) -> CoverageResult:
    """Christoffersen's independence and conditional coverage LR tests (first-order Markov).

    Transitions ``n_ij`` count consecutive pairs (i then j) where both are observed.
    ``LR_ind = -2 [log L(pi) - log L(pi01, pi11)]`` ~ chi-squared(1) with pi01 = n01/(n00+n01),
    pi11 = n11/(n10+n11), pi = (n01+n11)/(n00+n01+n10+n11); ``LR_cc = LR_uc + LR_ind`` ~
    chi-squared(2), with ``LR_uc`` of :func:`kupiec` on all observed hits (the usual sum form).

    Parameters
    ----------
    hits : array_like of {0, 1, NaN}, shape (T,)
    coverage : float

    Returns
    -------
    CoverageResult

    References
    ----------
    Christoffersen, P. F. (1998). Evaluating interval forecasts. International Economic Review
    39(4), 841-862.
    """
    x = _hits(hits, coverage, "christoffersen")
    base = kupiec(x, coverage)
    a, b = x[:-1], x[1:]
    ok = ~(np.isnan(a) | np.isnan(b))
    a, b = a[ok], b[ok]
    n00 = float(((a == 0) & (b == 0)).sum())
    n01 = float(((a == 0) & (b == 1)).sum())
    n10 = float(((a == 1) & (b == 0)).sum())
    n11 = float(((a == 1) & (b == 1)).sum())
    counts = {**base.counts, "n00": int(n00), "n01": int(n01), "n10": int(n10), "n11": int(n11)}
    total = n00 + n01 + n10 + n11
    if total == 0:
        return CoverageResult(base.lr_uc, base.p_uc, base.n, base.hit_rate, coverage, counts=counts)
    pi01 = n01 / (n00 + n01) if n00 + n01 > 0 else 0.0
    pi11 = n11 / (n10 + n11) if n10 + n11 > 0 else 0.0
    pi = (n01 + n11) / total
    ll_null = special.xlogy(n00 + n10, 1 - pi) + special.xlogy(n01 + n11, pi)
    ll_alt = (special.xlogy(n00, 1 - pi01) + special.xlogy(n01, pi01)
              + special.xlogy(n10, 1 - pi11) + special.xlogy(n11, pi11))
    lr_ind = float(max(-2.0 * (ll_null - ll_alt), 0.0))
    lr_cc = base.lr_uc + lr_ind
    return CoverageResult(base.lr_uc, base.p_uc, base.n, base.hit_rate, coverage, lr_ind,
                          float(stats.chi2.sf(lr_ind, 1)), lr_cc, float(stats.chi2.sf(lr_cc, 2)),
                          counts)


# --------------------------------------------------------------------------- PIT tests


@dataclass(frozen=True)
class BerkowitzResult:
    """Result of :func:`berkowitz`: ``lr`` (chi-squared(3), H0: mu=0, sigma=1, rho=0) and
    ``lr_ind`` (chi-squared(1), H0: rho=0 with mu, sigma free), with the AR(1) estimates."""

    lr: float
    pvalue: float
    lr_ind: float
    p_ind: float
    mu: float
    sigma: float
    rho: float
    loglik: float
    n: int
    likelihood: str
    note: str = ""


def _ar1_exact_loglik(z: np.ndarray, mu: float, sigma: float, rho: float) -> float:
    """Exact Gaussian AR(1) log-likelihood, first value from the stationary law."""
    e = z[1:] - mu - rho * (z[:-1] - mu)
    v1 = sigma**2 / (1 - rho**2)
    ll1 = -0.5 * (math.log(2 * math.pi * v1) + (z[0] - mu) ** 2 / v1)
    return float(ll1 - 0.5 * e.size * math.log(2 * math.pi * sigma**2) - (e @ e) / (2 * sigma**2))


def _norm_loglik(z: np.ndarray, mu: float, sigma: float) -> float:
    return float(np.sum(stats.norm.logpdf(z, mu, sigma)))


def berkowitz(pit, *, likelihood: Literal["exact", "conditional"] = "exact",
              eps: float = 1e-6) -> BerkowitzResult:
    """Berkowitz's LR test that z = Phi^{-1}(PIT) is i.i.d. N(0, 1), against a Gaussian AR(1).

    Model ``z_t - mu = rho (z_{t-1} - mu) + e_t``, ``e_t ~ N(0, sigma^2)``. With
    ``likelihood="exact"`` (as in Berkowitz 2001) the first observation has its stationary law
    and the maximum is found numerically (started from the conditional estimates); with
    ``"conditional"`` the likelihood conditions on z_1 and the estimates are OLS. The PIT is
    clipped to ``[eps, 1 - eps]`` first (default 1e-6, so |z| <= 4.75) because an ensemble's
    PIT can be exactly 0 or 1.

    Parameters
    ----------
    pit : array_like, shape (T,)
        PIT values in time order; NaN are dropped.
    likelihood : {"conditional", "exact"}
    eps : float

    Returns
    -------
    BerkowitzResult

    References
    ----------
    Berkowitz, J. (2001). Testing density forecasts, with applications to risk management.
    Journal of Business & Economic Statistics 19(4), 465-474.
    """
    where = "berkowitz"
    _check_choice(likelihood, ("conditional", "exact"), "likelihood", where)
    if not 0 < eps < 0.5:
        raise ValueError(f"{where}: eps must lie in (0, 0.5); got {eps!r}")
    u = np.asarray(pit, dtype=np.float64).ravel()
    u = u[~np.isnan(u)]
    if ((u < 0) | (u > 1)).any():
        raise ValueError(f"{where}: PIT values must lie in [0, 1]; got min {u.min()!r}, max {u.max()!r}")
    n = u.size
    nan = float("nan")
    if n < 4:
        return BerkowitzResult(nan, nan, nan, nan, nan, nan, nan, nan, n, likelihood,
                               f"only {n} PIT value(s); at least 4 are needed")
    z = special.ndtri(np.clip(u, eps, 1 - eps))
    x0, x1 = z[:-1], z[1:]
    design = np.column_stack([np.ones(n - 1), x0])
    coef, *_ = np.linalg.lstsq(design, x1, rcond=None)
    resid = x1 - design @ coef
    s2 = float(resid @ resid / (n - 1))
    rho_c = float(coef[1])
    if not s2 > 0 or not abs(rho_c) < 1:
        return BerkowitzResult(nan, nan, nan, nan, nan, nan, rho_c, nan, n, likelihood,
                               "degenerate PIT series (no variation or a unit root)")
    mu_c = float(coef[0] / (1 - rho_c))
    if likelihood == "conditional":
        ll1 = _norm_loglik(resid, 0.0, math.sqrt(s2))
        ll0 = _norm_loglik(x1, 0.0, 1.0)
        llr = _norm_loglik(x1, x1.mean(), x1.std())
        mu, sigma, rho = mu_c, math.sqrt(s2), rho_c
    else:
        def nll(theta):
            return -_ar1_exact_loglik(z, theta[0], math.exp(theta[1]), math.tanh(theta[2]))

        start = np.array([mu_c, 0.5 * math.log(s2), math.atanh(rho_c)])
        fit = optimize.minimize(nll, start, method="BFGS", options={"gtol": 1e-8})
        mu, sigma, rho = float(fit.x[0]), math.exp(fit.x[1]), math.tanh(fit.x[2])
        ll1 = -float(fit.fun)
        ll0 = _norm_loglik(z, 0.0, 1.0)
        llr = _norm_loglik(z, z.mean(), z.std())
    lr = max(2.0 * (ll1 - ll0), 0.0)
    lr_ind = max(2.0 * (ll1 - llr), 0.0)
    return BerkowitzResult(lr, float(stats.chi2.sf(lr, 3)), lr_ind, float(stats.chi2.sf(lr_ind, 1)),
                           mu, sigma, rho, ll1, n, likelihood)


def cvm_limit_cdf(x) -> np.ndarray:
    """CDF of the limiting Cramer-von Mises statistic (integral of a squared Brownian bridge).

    Uses the series of Anderson & Darling (1952) in the Bessel-function form of Csorgo &
    Faraway (1996, eq. 1.3), truncated after 20 terms.

    Parameters
    ----------
    x : float or ndarray

    Returns
    -------
    ndarray

    References
    ----------
    Anderson, T. W. and Darling, D. A. (1952). Asymptotic theory of certain goodness of fit
    criteria based on stochastic processes. Annals of Mathematical Statistics 23(2), 193-212.
    Csorgo, S. and Faraway, J. J. (1996). The exact and asymptotic distributions of Cramer-von
    Mises statistics. JRSS B 58(1), 221-234.
    """
    x = np.atleast_1d(np.asarray(x, dtype=np.float64))
    out = np.zeros_like(x)
    pos = x > 0
    xp = x[pos][:, None]
    k = np.arange(20)[None, :]
    u = (4 * k + 1) ** 2 / (16 * xp)
    coef = np.exp(special.gammaln(k + 0.5) - special.gammaln(0.5) - special.gammaln(k + 1))
    terms = coef * np.sqrt(4 * k + 1) * special.kve(0.25, u) * np.exp(-2 * u)
    out[pos] = terms.sum(axis=1) / (math.pi * np.sqrt(xp[:, 0]))
    return np.clip(out, 0.0, 1.0)


@dataclass(frozen=True)
class PITUniformityResult:
    """Result of :func:`rossi_sekhposyan`: KS-type ``ks`` and CvM-type ``cvm`` statistics,
    critical values by size, p-values, and how they were obtained."""

    ks: float
    cvm: float
    ks_pvalue: float
    cvm_pvalue: float
    ks_critical: dict
    cvm_critical: dict
    method: str
    n: int
    h: int
    block_len: int | None = None


def _uniformity_stats(u: np.ndarray) -> tuple[float, float]:
    """Exact sup_r sqrt(P)|F_P(r) - r| and P * integral (F_P(r) - r)^2 dr from sorted PITs."""
    p = u.size
    s = np.sort(u)
    i = np.arange(1, p + 1)
    d = max(float(np.max(i / p - s)), float(np.max(s - (i - 1) / p)))
    w2 = 1.0 / (12 * p) + float(np.sum((s - (2 * i - 1) / (2 * p)) ** 2))
    return math.sqrt(p) * d, w2


def rossi_sekhposyan(pit, h: int = 1, *, alphas=(0.01, 0.05, 0.10), n_boot: int = 999,
                     block_len: int | None = None, seed: int = 0) -> PITUniformityResult:
    """Rossi-Sekhposyan tests of PIT uniformity: KS-type and Cramer-von Mises-type statistics.

    ``kappa = sup_r |xi(r)|`` and ``C = integral_0^1 xi(r)^2 dr`` with
    ``xi(r) = P^{-1/2} sum_t (1{pit_t <= r} - r)``, evaluated exactly from the sorted PITs. For
    h = 1 the PITs of a correct density are i.i.d. U(0, 1) and the limits are the Brownian
    bridge functionals (critical values :data:`KS_CV`, :data:`CVM_CV`; p-values from the
    Kolmogorov distribution and :func:`cvm_limit_cdf`). For h > 1 the PITs are serially
    dependent and the critical values come from a moving-block bootstrap of the empirical
    process ``sqrt(P)(F*_P - F_P)`` (block length default ``max(h, ceil(P^(1/3)))``, common
    practice), evaluated exactly on the data points.

    Parameters
    ----------
    pit : array_like, shape (P,)
        PITs in time order; NaN dropped.
    h : int
        Forecast horizon (>= 1).
    alphas : sequence of float
        Sizes at which critical values are reported (0.01, 0.05, 0.10 tabulated for h = 1).
    n_boot : int
        Bootstrap resamples (h > 1).
    block_len : int, optional
    seed : int

    Returns
    -------
    PITUniformityResult

    References
    ----------
    Rossi, B. and Sekhposyan, T. (2019). Alternative tests for correct specification of
    conditional predictive densities. Journal of Econometrics 208(2), 638-657.
    """
    where = "rossi_sekhposyan"
    h = _check_int(h, "h", where, 1)
    u = np.asarray(pit, dtype=np.float64).ravel()
    u = u[~np.isnan(u)]
    if ((u < 0) | (u > 1)).any():
        raise ValueError(f"{where}: PIT values must lie in [0, 1]; got min {u.min()!r}, max {u.max()!r}")
    p = u.size
    if p < 2:
        raise ValueError(f"{where}: only {p} PIT value(s); need at least 2")
    ks, cvm = _uniformity_stats(u)
    alphas = tuple(float(a) for a in alphas)
    if h == 1:
        missing = sorted(set(alphas) - set(KS_CV))
        if missing:
            raise ValueError(f"{where}: no tabulated critical values for sizes {missing}; expected "
                             f"a subset of {sorted(KS_CV)}")
        return PITUniformityResult(ks, cvm, float(stats.kstwobign.sf(ks)),
                                   float(1.0 - cvm_limit_cdf(cvm)[0]),
                                   {a: KS_CV[a] for a in alphas}, {a: CVM_CV[a] for a in alphas},
                                   "asymptotic", p, h)
    bl = max(h, math.ceil(p ** (1 / 3))) if block_len is None else _check_int(block_len, "block_len", where, 1)
    idx = bootstrap_indices(p, _check_int(n_boot, "n_boot", where, 1), bl, "moving_block", seed)
    order = np.argsort(u, kind="stable")
    rank = np.empty(p, dtype=np.int64)
    rank[order] = np.arange(p)
    s = u[order]
    # counts of each sorted data point in each resample, then the bootstrap ECDF at the points
    cnt = np.bincount((rank[idx] + (np.arange(idx.shape[0]) * p)[:, None]).ravel(),
                      minlength=idx.shape[0] * p).reshape(idx.shape[0], p)
    fstar = np.cumsum(cnt, axis=1) / p
    fhat = np.arange(1, p + 1) / p
    dev = fstar - fhat
    width = np.diff(np.append(s, 1.0))
    ks_b = math.sqrt(p) * np.abs(dev).max(axis=1)
    cvm_b = p * (dev**2 @ width)
    return PITUniformityResult(
        ks, cvm, float((ks_b >= ks).mean()), float((cvm_b >= cvm).mean()),
        {a: float(np.quantile(ks_b, 1 - a)) for a in alphas},
        {a: float(np.quantile(cvm_b, 1 - a)) for a in alphas}, "moving-block bootstrap", p, h, bl)


def pit_histogram(pit, bins: int = 10) -> np.ndarray:
    """Counts of PIT values in ``bins`` equal-width bins of [0, 1] (1.0 in the last bin).

    Parameters
    ----------
    pit : array_like
        NaN dropped.
    bins : int

    Returns
    -------
    ndarray of int64, shape (bins,)
    """
    bins = _check_int(bins, "bins", "pit_histogram", 1)
    u = np.asarray(pit, dtype=np.float64).ravel()
    u = u[~np.isnan(u)]
    if ((u < 0) | (u > 1)).any():
        raise ValueError("pit_histogram: PIT values must lie in [0, 1]; got min "
                         f"{u.min()!r}, max {u.max()!r}")
    return np.bincount(np.minimum((u * bins).astype(np.int64), bins - 1), minlength=bins)
