"""Tests of PIT calibration: Berkowitz (Gaussian AR(1) LR) and Rossi–Sekhposyan (uniformity), PIT histograms."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import optimize, special

from harness.compare._checks import _check_choice, _check_int, chi2_sf
from harness.compare.bootstrap import bootstrap_indices

# Asymptotic critical values of the Kolmogorov-Smirnov (sup |Brownian bridge|) and
# Cramer-von Mises (integral of the squared bridge) statistics, used by Rossi & Sekhposyan
# (2019) for one-step-ahead PITs. From memory (Smirnov 1948; Anderson & Darling 1952); the
# test suite checks them against scipy's Kolmogorov distribution and our CvM limit CDF.
KS_CV: dict[float, float] = {0.01: 1.6276, 0.05: 1.3581, 0.10: 1.2238}
CVM_CV: dict[float, float] = {0.01: 0.7435, 0.05: 0.4614, 0.10: 0.3473}


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
    r = (np.asarray(z, dtype=np.float64) - mu) / sigma
    return float(-0.5 * np.sum(r * r) - r.size * (math.log(sigma) + 0.5 * math.log(2 * math.pi)))


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
    return BerkowitzResult(lr, chi2_sf(lr, 3), lr_ind, chi2_sf(lr_ind, 1),
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
        return PITUniformityResult(ks, cvm, float(special.kolmogorov(ks)),
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
