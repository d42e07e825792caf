"""The Diebold–Mariano test of equal predictive accuracy, with small-sample inference.

Four ways to studentise the mean loss differential, chosen by ``method``:

* ``"fixed_m"`` (default): the weighted-periodogram long-run variance (Daniell kernel, first
  ``m = floor(T^(1/3))`` Fourier frequencies) with Student-t(2m) critical values — the
  fixed-smoothing test of Coroneo and Iacone (2020), whose size holds in samples as small as
  the ones a review meeting sees;
* ``"fixed_b"``: the Bartlett-kernel estimate with bandwidth ``M = floor(T^(1/2))`` and
  fixed-b critical values (Kiefer and Vogelsang 2005), the other estimator of Coroneo and
  Iacone (2020);
* ``"hln"``: the rectangular kernel with ``h - 1`` lags, the Harvey–Leybourne–Newbold factor
  and Student-t(T - 1) (the previous default);
* ``"dm"``: the rectangular kernel with ``h - 1`` lags and N(0, 1) (Diebold and Mariano 1995).

Whatever the method, the result is NaN with a note when ``h >= T`` (overlapping h-step
forecasts then carry no independent information: with ``T - 1`` rectangular lags the long-run
variance of demeaned data is exactly zero, and rounding leaves a positive 1e-17 that would
read as overwhelming significance) and when the long-run variance is zero relative to the
data's scale (:data:`RELATIVE_TOLERANCE`).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from harness.compare._checks import (
    ALTERNATIVES,
    Alternative,
    _check_choice,
    _check_int,
    _pairs,
    _pvalue,
    normal_cdf,
    t_cdf,
)
from vintages import KERNELS, Kernel, daniell_variance, long_run_variance

DMMethod = Literal["fixed_m", "fixed_b", "hln", "dm"]
DM_METHODS: tuple[str, ...] = ("dm", "fixed_b", "fixed_m", "hln")

# A long-run variance at or below RELATIVE_TOLERANCE * mean(d^2) is treated as zero. Why 1e-12:
# the ledger keeps draws in float32 (relative resolution 2^-24 = 6e-8), so a differential whose
# standard deviation is below 1e-6 of its root mean square (about 17 float32 steps) cannot be
# told from rounding of the inputs; 1e-12 is that ratio squared. It is also above the
# double-precision rounding error of the estimators themselves (a quadratic form of T terms
# with 2L + 1 bands: about T (2L + 1) 2.2e-16 <= 1e-12 for T <= 200, L <= 10), which is what a
# degenerate variance leaves behind (1e-17 on data of unit scale in the reviewed cases).
RELATIVE_TOLERANCE = 1e-12

# Kiefer & Vogelsang (2005, Econometric Theory 21(6), 1130-1164): critical values of the
# fixed-b limit of the t-statistic, Bartlett kernel, as cubic polynomials in b = M/T
# (one-sided percentiles 0.90, 0.95, 0.975). Typed from memory; the test suite checks them
# against a simulation of the limit. The p-values below come from simulation, not from these.
KV2005_BARTLETT: dict[float, tuple[float, float, float, float]] = {
    0.900: (1.2816, 1.3040, 0.5135, -0.3386),
    0.950: (1.6449, 2.1859, 0.3142, -0.3427),
    0.975: (1.9600, 2.9694, 0.4160, -0.5324),
}
FIXED_B_DRAWS = 50_000
_FIXED_B_SEED = 20050601  # any fixed value: the reference distribution must not vary by call


@dataclass(frozen=True)
class DMResult:
    """Result of :func:`diebold_mariano`.

    ``stat`` is the studentised statistic of the chosen ``method``, ``pvalue`` its p-value,
    ``mean_diff`` the mean of loss_a - loss_b, ``n`` the pairs used, ``n_dropped`` pairs dropped
    for NaN, ``kernel`` the long-run variance estimate actually used (``daniell``, ``bartlett``,
    ``rectangular`` or the Bartlett fallback), ``bandwidth`` its m (Daniell), M (Bartlett,
    fixed-b) or lags (rectangular), ``df`` the Student-t degrees of freedom (NaN for N(0, 1) and
    fixed-b), ``critical`` two-sided 10/5 % critical values of the reference law, ``note`` why a
    NaN was returned.
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
    method: str = "fixed_m"
    bandwidth: int = 0
    df: float = float("nan")
    variance: float = float("nan")
    critical: tuple[float, float] = (float("nan"), float("nan"))

    @property
    def statistic(self) -> float:
        """The statistic under the name every registered test uses."""
        return self.stat


def hln_factor(n: int, h: int) -> float:
    """Harvey-Leybourne-Newbold small-sample factor sqrt((T + 1 - 2h + h(h - 1)/T) / T).

    The expression under the root equals ``(T - h)(T - h + 1) / T^2``: zero at h = T and
    positive again from h = T + 2, where the factor has no meaning; NaN is returned for every
    ``h >= T``.

    Parameters
    ----------
    n : int
        Number of forecast pairs T.
    h : int
        Forecast horizon (>= 1).

    Returns
    -------
    float
        NaN when ``h >= T``.

    References
    ----------
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13(2), 281-291.
    """
    if h >= n:
        return float("nan")
    return math.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)


def _iroot(n: int, k: int) -> int:
    """floor(n ** (1/k)) exactly (floating roots of perfect powers can fall just short)."""
    r = int(round(n ** (1.0 / k)))
    while r**k > n:
        r -= 1
    while (r + 1) ** k <= n:
        r += 1
    return r


def default_bandwidth(method: str, n: int, h: int = 1) -> int:
    """Default m (fixed_m: ``floor(T^(1/3))``), M (fixed_b: ``floor(T^(1/2))``) or lags (``h - 1``).

    References
    ----------
    Coroneo, L. and Iacone, F. (2020). Journal of Applied Econometrics 35(4), 391-409 (their
    recommended m = floor(T^(1/3)) and M = floor(T^(1/2))).
    """
    if method == "fixed_m":
        return max(_iroot(n, 3), 1)
    if method == "fixed_b":
        return max(_iroot(n, 2), 1)
    return h - 1


# Minimum sample of the fixed-m test: the m frequencies averaged must lie where the spectrum of
# an MA(h - 1) loss differential is still roughly flat, lambda_m = 2 pi m / T <= 2 / h (its
# first zero is at 2 pi / h). At the smallest T passing the rule a Monte Carlo (3000
# replications per cell; the suite re-checks T = 20, 40 and h = 1, 4) finds sizes of
# 0.049-0.069 at 5 % for equal-weight MA(h - 1) differentials (the worst case) and 0.049-0.063
# for weights 0.5^i, h = 1..9; below it up to 0.38 (h = 6, T = 8).
FREQUENCY_BOUND = 2.0
MIN_PAIRS = 8


@functools.lru_cache(maxsize=256)
def fixed_m_min_n(h: int, bandwidth: int = 0) -> int:
    """Smallest T from which the fixed-m rule ``2 pi m h / T <= 2`` holds for every larger T.

    With the default ``m = floor(T^(1/3))`` the rule is not monotone in T (m jumps at cubes), so
    the bound is the last failure plus one; with a fixed ``bandwidth`` m it is
    ``max(8, 2m + 1, ceil(pi m h))``.
    """
    h = int(h)
    if bandwidth:
        return max(MIN_PAIRS, 2 * int(bandwidth) + 1,
                   math.ceil(2 * math.pi * bandwidth * h / FREQUENCY_BOUND - 1e-9))
    k = 1
    while k * k * FREQUENCY_BOUND < 2 * math.pi * h:  # beyond k^3 the rule holds at every cube
        k += 1
    for t in range((k + 1) ** 3, MIN_PAIRS - 1, -1):
        if 2 * math.pi * max(_iroot(t, 3), 1) * h > FREQUENCY_BOUND * t:
            return max(t + 1, MIN_PAIRS)
    return MIN_PAIRS


def dm_min_n(h: int, method: str = "fixed_m", bandwidth: int = 0) -> int:
    """The minimum number of pairs at which the registered DM test is run (see the registry).

    ``fixed_m``: :func:`fixed_m_min_n`; the other methods ``max(8, 10 h)`` (common practice;
    they over-reject at the boundary, see the registry's rule).
    """
    if method == "fixed_m":
        return fixed_m_min_n(int(h), int(bandwidth or 0))
    return max(MIN_PAIRS, 10 * int(h))


DM_LABELS: dict[str, str] = {
    "fixed_m": "Diebold–Mariano, fixed-m (Daniell, t(2m))",
    "fixed_b": "Diebold–Mariano, fixed-b (Bartlett)",
    "hln": "Diebold–Mariano (HLN)",
    "dm": "Diebold–Mariano (normal)",
}


def kv_critical_value(b: float, level: float = 0.975) -> float:
    """Kiefer-Vogelsang (2005) fixed-b critical value (Bartlett) at ``b = M/T``, from memory.

    Parameters
    ----------
    b : float
        Bandwidth share in (0, 1].
    level : {0.9, 0.95, 0.975}
        One-sided percentile (0.975 is the two-sided 5 % critical value).

    References
    ----------
    Kiefer, N. M. and Vogelsang, T. J. (2005). A new asymptotic theory for
    heteroskedasticity-autocorrelation robust tests. Econometric Theory 21(6), 1130-1164.
    """
    a0, a1, a2, a3 = KV2005_BARTLETT[level]
    return a0 + a1 * b + a2 * b**2 + a3 * b**3


def _bartlett_from_partial_sums(e: np.ndarray, big_m: int) -> tuple[np.ndarray, np.ndarray]:
    """Studentised means of the rows of ``e`` with the Bartlett estimate (bandwidth M).

    Uses the exact identity ``T Omega = (2/M) [sum_t S_t^2 - sum_t S_t S_{t+M}]`` for demeaned
    data with partial sums ``S`` (``S_T = 0``), so each row costs O(T) (Kiefer and Vogelsang
    2002, the Bartlett kernel in partial sums).
    """
    t = e.shape[1]
    mean = e.mean(axis=1, keepdims=True)
    s = np.cumsum(e - mean, axis=1)
    omega = (2.0 / big_m) * ((s * s).sum(axis=1) - (s[:, :t - big_m] * s[:, big_m:]).sum(axis=1)) / t
    return math.sqrt(t) * mean[:, 0], omega


@functools.lru_cache(maxsize=64)
def fixed_b_null(n: int, big_m: int) -> np.ndarray:
    """Sorted draws of the fixed-b reference law at (T, M): the Bartlett-studentised mean of T
    i.i.d. N(0, 1) values, :data:`FIXED_B_DRAWS` draws from a fixed seed (cached).

    Under fixed-b asymptotics the statistic's law depends only on b = M/T; simulating it at the
    sample's own T and M gives that law (its T -> infinity limit is Kiefer and Vogelsang's)
    without a table. The Monte Carlo error of a p-value near 0.05 is about 0.001.
    """
    rng = np.random.default_rng([_FIXED_B_SEED, int(n), int(big_m)])
    out = np.empty(FIXED_B_DRAWS)
    step = max(1, 4_000_000 // max(n, 1))
    for s0 in range(0, FIXED_B_DRAWS, step):
        k = min(step, FIXED_B_DRAWS - s0)
        num, omega = _bartlett_from_partial_sums(rng.standard_normal((k, n)), big_m)
        with np.errstate(divide="ignore", invalid="ignore"):
            out[s0:s0 + k] = num / np.sqrt(omega)
    out = np.sort(out)
    out.setflags(write=False)
    return out


@functools.lru_cache(maxsize=64)
def _fixed_b_critical(n: int, big_m: int) -> tuple[float, float]:
    """One-sided 95 % and 97.5 % quantiles of :func:`fixed_b_null` (two-sided 10 % and 5 %)."""
    q = np.quantile(fixed_b_null(n, big_m), [0.95, 0.975])
    return float(q[0]), float(q[1])


def _empirical_cdf(draws: np.ndarray):
    """CDF of a sorted sample with the (count + 1)/(N + 1) Monte Carlo rule (never 0)."""
    n = draws.size

    def cdf(x):
        return (np.searchsorted(draws, x, side="right") + 1.0) / (n + 1.0)

    return cdf


def diebold_mariano(loss_a, loss_b, h: int = 1, *, method: DMMethod | None = None,
                    hln: bool | None = None, kernel: Kernel = "rectangular",
                    bandwidth: int | None = None, alternative: Alternative = "two-sided",
                    positions=None) -> DMResult:
    """Diebold-Mariano test of equal expected loss, with small-sample (fixed-smoothing) inference.

    ``d_t = loss_a - loss_b`` and ``stat = sqrt(T) mean(d) / sqrt(Omega)`` with ``Omega`` the
    long-run variance estimate of ``method`` (see the module docstring):

    * ``fixed_m``: ``Omega = (1/m) sum_{j=1}^m |sum_t d_t exp(-i 2 pi j t / T)|^2 / T``, the
      Daniell weighted periodogram (:func:`vintages.daniell_variance`); reference Student-t(2m).
    * ``fixed_b``: Bartlett weights ``1 - j/M`` for ``j < M``; reference the fixed-b law at
      b = M/T (:func:`fixed_b_null`), p-values by simulation.
    * ``hln``: rectangular ``h - 1`` lags (Bartlett if the rectangular estimate is not
      positive), times :func:`hln_factor`, Student-t(T - 1).
    * ``dm``: as ``hln`` without the factor, N(0, 1).

    NaN with a note when ``h >= T``, when fewer than the method needs, or when ``Omega`` is at
    most :data:`RELATIVE_TOLERANCE` times ``mean(d^2)`` (a numerically constant differential).

    Parameters
    ----------
    loss_a, loss_b : array_like, shape (T,)
        Losses of the two forecasts for the same targets, in time order.
    h : int
        Forecast horizon in steps (>= 1): the loss differential of h-step forecasts is at most
        MA(h - 1).
    method : {"dm", "fixed_b", "fixed_m", "hln"}, optional
        Default ``"fixed_m"``; ``hln=True`` / ``False`` (the former keyword) stands for
        ``"hln"`` / ``"dm"``.
    hln : bool, optional
        Former switch between ``"hln"`` and ``"dm"``; ignored when ``method`` is given.
    kernel : {"bartlett", "rectangular"}
        Weights of the ``hln`` and ``dm`` methods.
    bandwidth : int, optional
        m (fixed_m), M (fixed_b) or lags (hln, dm); default :func:`default_bandwidth`.
    alternative : {"greater", "less", "two-sided"}
        "less": forecast a has lower expected loss; "greater": higher.
    positions : array_like of int, shape (T,), optional
        Time positions of the pairs (e.g. target-period ordinals), before NaN pairs are
        dropped; autocovariances and Fourier sums then use true distances (sub-samples with
        gaps).

    Returns
    -------
    DMResult

    Raises
    ------
    ValueError
        Different lengths, h < 1, unknown method, kernel or alternative, bad bandwidth.

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business
    & Economic Statistics 13(3), 253-263.
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13(2), 281-291.
    Coroneo, L. and Iacone, F. (2020). Comparing predictive accuracy in small samples using
    fixed-smoothing asymptotics. Journal of Applied Econometrics 35(4), 391-409.
    Kiefer, N. M. and Vogelsang, T. J. (2005). A new asymptotic theory for
    heteroskedasticity-autocorrelation robust tests. Econometric Theory 21(6), 1130-1164.

    Examples
    --------
    >>> res = diebold_mariano([1.0, 2.0, 0.5, 1.5, 2.5, 1.1, 0.7], [1.2, 2.6, 0.9, 1.4, 3.1, 1.5, 1.0])
    >>> res.method, res.bandwidth, res.df, round(res.stat, 3)
    ('fixed_m', 1, 2.0, -16.044)
    """
    where = "diebold_mariano"
    if method is None:
        method = "fixed_m" if hln is None else ("hln" if hln else "dm")
    _check_choice(method, DM_METHODS, "method", where)
    h = _check_int(h, "h", where, 1)
    _check_choice(kernel, KERNELS, "kernel", where)
    _check_choice(alternative, ALTERNATIVES, "alternative", where)
    d, dropped = _pairs(loss_a, loss_b, where)
    pos = None
    if positions is not None:
        x = np.asarray(loss_a, dtype=np.float64).ravel()
        y = np.asarray(loss_b, dtype=np.float64).ravel()
        p = np.asarray(positions)
        if p.shape != x.shape:
            raise ValueError(f"{where}: positions has {p.size} values and the losses {x.size}; "
                             "expected one position per pair")
        pos = p[~(np.isnan(x) | np.isnan(y))]
    t = d.size
    if bandwidth is not None:
        bandwidth = _check_int(bandwidth, "bandwidth", where, 0 if method in ("hln", "dm") else 1)
    bw = default_bandwidth(method, max(t, 1), h) if bandwidth is None else bandwidth
    used = {"fixed_m": "daniell", "fixed_b": "bartlett"}.get(method, kernel)
    mean = float(d.mean()) if t else float("nan")

    def empty(note: str, used_: str = used) -> DMResult:
        return DMResult(float("nan"), float("nan"), mean, t, h, method == "hln", used_, alternative,
                        dropped, note, method, int(bw))

    if t < 2:
        return empty(f"only {t} complete pair(s) of losses; at least 2 are needed")
    if h >= t:
        return empty(f"h = {h} >= T = {t}: overlapping {h}-step forecasts leave no independent "
                     "information (the long-run variance is degenerate)")
    scale = float(np.mean(d * d))
    constant = ("the loss differential is (numerically) constant: its long-run variance is zero "
                f"relative to its scale (<= {RELATIVE_TOLERANCE:g} mean(d^2)); the test is undefined")
    if not scale > 0:
        return empty(constant)
    df = float("nan")
    if method == "fixed_m":
        if not bw <= (t - 1) // 2:
            return empty(f"m = {bw} Fourier frequencies need T >= {2 * bw + 1}; got T = {t}")
        v = daniell_variance(d, bw, positions=pos)
        df = 2.0 * bw
        cdf = t_cdf(df)
        crit = (float(_t_ppf(0.95, df)), float(_t_ppf(0.975, df)))
    elif method == "fixed_b":
        if not bw <= t:
            return empty(f"bandwidth M = {bw} exceeds T = {t}")
        v = long_run_variance(d, bw - 1, "bartlett", positions=pos)
        cdf = _empirical_cdf(fixed_b_null(t, bw))
        crit = _fixed_b_critical(t, bw)
    else:
        v = long_run_variance(d, bw, kernel, positions=pos)
        if not v > RELATIVE_TOLERANCE * scale and kernel == "rectangular":
            used = "bartlett (fallback: rectangular variance not positive)"
            v = long_run_variance(d, bw, "bartlett", positions=pos)
        if method == "hln":
            df = float(t - 1)
            cdf = t_cdf(df)
            crit = (float(_t_ppf(0.95, df)), float(_t_ppf(0.975, df)))
        else:
            cdf = normal_cdf
            crit = (1.6448536269514722, 1.959963984540054)
    if not v > RELATIVE_TOLERANCE * scale:
        return empty(constant, used)
    stat = mean / math.sqrt(v / t)
    if method == "hln":
        stat *= hln_factor(t, h)
    return DMResult(float(stat), _pvalue(stat, cdf, alternative), mean, t, h, method == "hln", used,
                    alternative, dropped, "", method, int(bw), df, float(v), crit)


def _t_ppf(q: float, df: float) -> float:
    from scipy import special

    return float(special.stdtrit(df, q))
