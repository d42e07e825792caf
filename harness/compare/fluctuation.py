"""The Giacomini–Rossi fluctuation test: rolling-window comparisons against a sup bound."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from harness.compare._checks import _check_choice, _check_int, _pairs
from harness.compare.dm import RELATIVE_TOLERANCE
from vintages import KERNELS, Kernel, long_run_variance

# Giacomini & Rossi (2010, Journal of Applied Econometrics 25(4), Table I): two-sided critical
# values k_alpha of the Fluctuation test, by window share mu. Typed from memory; the test suite
# checks them against simulate_fluctuation_cv.
FLUCTUATION_CV: dict[float, dict[float, float]] = {
    0.05: {0.1: 3.393, 0.2: 3.179, 0.3: 3.012, 0.4: 2.890, 0.5: 2.779,
           0.6: 2.634, 0.7: 2.560, 0.8: 2.433, 0.9: 2.248},
    0.10: {0.1: 3.170, 0.2: 2.948, 0.3: 2.766, 0.4: 2.626, 0.5: 2.500,
           0.6: 2.356, 0.7: 2.252, 0.8: 2.130, 0.9: 1.950},
}


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
                     n_sim: int = 20_000, n_grid: int = 500, seed: int = 0,
                     positions=None) -> FluctuationResult:
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
    positions : array_like of int, shape (P,), optional
        Time positions of the pairs (before NaN pairs are dropped), so that the long-run
        variance pairs only forecasts that really are j periods apart.

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
    pos = None
    if positions is not None:
        keep = ~(np.isnan(np.asarray(loss_a, dtype=np.float64).ravel())
                 | np.isnan(np.asarray(loss_b, dtype=np.float64).ravel()))
        pos = np.asarray(positions)[keep]
    p = d.size
    m = int(round(mu * p))
    nan = np.array([])
    if m < 2:
        return FluctuationResult(nan, nan.astype(np.int64), float("nan"), cv, False, mu, alpha,
                                 m, p, float("nan"), f"window of {m} pair(s) is too short (P = {p})")
    if h >= p:
        return FluctuationResult(nan, nan.astype(np.int64), float("nan"), cv, False, mu, alpha,
                                 m, p, float("nan"), f"h = {h} >= P = {p}: the long-run variance "
                                 "is degenerate")
    tol = RELATIVE_TOLERANCE * float(np.mean(d * d))
    v = long_run_variance(d, h - 1, kernel, positions=pos)
    if not v > tol:
        v = long_run_variance(d, h - 1, "bartlett", positions=pos)
    if not v > tol:
        return FluctuationResult(nan, nan.astype(np.int64), float("nan"), cv, False, mu, alpha,
                                 m, p, 0.0, "the loss differential is constant (zero variance)")
    sigma = math.sqrt(v)
    c = np.concatenate([[0.0], np.cumsum(d)])
    path = (c[m:] - c[:-m]) / (math.sqrt(m) * sigma)
    stat = float(np.max(np.abs(path)))
    return FluctuationResult(path, np.arange(m - 1, p), stat, float(cv), bool(stat > cv), mu,
                             alpha, m, p, sigma, extra={"n_dropped": dropped})
