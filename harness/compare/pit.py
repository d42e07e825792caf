"""Tests of PIT calibration: Berkowitz (Gaussian AR(1) LR, one-step PITs), Rossi–Sekhposyan
(uniformity, bootstrap for h > 1), Knüppel (raw moments with a long-run covariance), histograms."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from harness._lazy import special
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


def _ar1_exact_nll_and_grad(theta: np.ndarray, z: np.ndarray) -> tuple[float, np.ndarray]:
    """Minus the exact AR(1) log-likelihood at ``(mu, log sigma, atanh rho)`` and its gradient.

    Derivatives by hand (chain rule through sigma = e^s, rho = tanh r); the tests check them
    against finite differences.
    """
    mu, s, r = float(theta[0]), float(theta[1]), float(theta[2])
    sigma2, rho = math.exp(2 * s), math.tanh(r)
    d0 = z[0] - mu
    x = z[:-1] - mu
    e = z[1:] - mu - rho * x
    n1 = e.size
    omr2 = 1.0 - rho * rho
    ssq = float(e @ e)
    ll = (-0.5 * (math.log(2 * math.pi * sigma2 / omr2) + d0 * d0 * omr2 / sigma2)
          - 0.5 * n1 * math.log(2 * math.pi * sigma2) - ssq / (2 * sigma2))
    g_mu = d0 * omr2 / sigma2 + (1.0 - rho) * float(e.sum()) / sigma2
    g_s2 = -0.5 / sigma2 + 0.5 * d0 * d0 * omr2 / sigma2**2 - 0.5 * n1 / sigma2 + ssq / (2 * sigma2**2)
    g_rho = -rho / omr2 + d0 * d0 * rho / sigma2 + float(e @ x) / sigma2
    grad = np.array([g_mu, g_s2 * 2 * sigma2, g_rho * omr2])
    return -ll, -grad


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
        start = np.array([mu_c, 0.5 * math.log(s2), math.atanh(rho_c)])
        from scipy import optimize  # its import costs ~0.3 s: only when a Berkowitz test runs

        fit = optimize.minimize(_ar1_exact_nll_and_grad, start, args=(z,), jac=True, method="BFGS",
                                options={"gtol": 1e-8})
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


@dataclass(frozen=True)
class RawMomentResult:
    """Result of :func:`knuppel`: the Wald-type ``stat`` (``T D' Omega^-1 D``), its reference law
    (``law``: ``"F(R, 2m - R + 1)"`` or ``"chi2(R)"``) and p-value, the moment deviations ``D``."""

    stat: float
    pvalue: float
    n: int
    h: int
    moments: tuple
    deviations: np.ndarray
    method: str
    bandwidth: int
    law: str
    note: str = ""


# Raw moments E[s^r] of the standardised uniform s = sqrt(12) (u - 1/2) (uniform on
# [-sqrt 3, sqrt 3]): 0 for odd r, 3^(r/2) / (r + 1) for even r.
def _uniform_raw_moment(r: int) -> float:
    return 0.0 if r % 2 else 3.0 ** (r / 2) / (r + 1)


def knuppel(pit, h: int = 1, *, moments=(1, 2), method: Literal["fixed_m", "bartlett"] = "fixed_m",
            joint: Literal["bonferroni", "wald"] = "bonferroni", bandwidth: int | None = None,
            positions=None) -> RawMomentResult:
    """Knüppel's raw-moment test of PIT calibration, valid for serially dependent (h-step) PITs.

    With the standardised PITs ``s_t = sqrt(12) (u_t - 1/2)`` and ``g_t = (s_t^r - E s^r)`` for
    the chosen moments r, ``D = mean(g)`` and ``stat = T D' Omega^-1 D`` with ``Omega`` a
    long-run covariance of ``g`` (Knüppel 2015 bases the test directly on the standardised
    PITs, which he finds to have the better size). Under correct calibration ``E g = 0``
    whatever the dependence of the PITs.

    * ``method="fixed_m"`` (default): ``Omega`` is the Daniell weighted periodogram over
      ``m = floor(T^(1/3))`` frequencies (:func:`vintages.daniell_covariance`), an orthonormal
      series estimate with K = 2m terms. ``joint="wald"``: ``(K - R + 1)/(K R) stat ~
      F(R, K - R + 1)`` (Sun 2013), needs ``K >= R``; ``joint="bonferroni"`` (default): one
      studentised moment ``t_r = sqrt(T) D_r / sqrt(Omega_rr) ~ t(2m)`` each (the scalar
      fixed-m law of Coroneo and Iacone 2020), ``stat = max |t_r|`` and ``p = min(1, R min_r
      p_r)``. The Bonferroni bound holds whatever the correlation of the moment tests; the
      joint Wald form over-rejects at 5 % by 4-7 points in the samples of a review (T = 20-40,
      h = 2-4, the suite's Monte Carlo), the per-moment form does not.
    * ``method="bartlett"``: Newey-West weights with ``bandwidth`` lags (default ``h - 1``) and
      chi-squared(R) (``wald``) or N(0, 1) per moment (``bonferroni``), as in Knüppel (2015).

    Parameters
    ----------
    pit : array_like, shape (T,)
        PITs in time order; NaN dropped.
    h : int
        Forecast horizon in steps (the Bartlett default lags are h - 1).
    moments : sequence of int
        Raw moments tested (default the first two: bias and dispersion, the failures a review
        acts on; each extra moment costs a degree of freedom of the fixed-m reference law).
    method : {"bartlett", "fixed_m"}
    joint : {"bonferroni", "wald"}
    bandwidth : int, optional
        m (fixed_m) or lags (bartlett).
    positions : array_like of int, optional
        Time positions of the PITs (gaps), as in :func:`vintages.daniell_covariance`.

    Returns
    -------
    RawMomentResult
        NaN with a note when the long-run covariance is singular (e.g. constant PITs).

    References
    ----------
    Knüppel, M. (2015). Evaluating the calibration of multi-step-ahead density forecasts using
    raw moments. Journal of Business & Economic Statistics 33(2), 270-281.
    Sun, Y. (2013). A heteroskedasticity and autocorrelation robust F test using an orthonormal
    series variance estimator. Econometrics Journal 16(1), 1-26.
    Coroneo, L. and Iacone, F. (2020). Journal of Applied Econometrics 35(4), 391-409.
    """
    from vintages import daniell_covariance, long_run_covariance

    where = "knuppel"
    h = _check_int(h, "h", where, 1)
    _check_choice(method, ("bartlett", "fixed_m"), "method", where)
    _check_choice(joint, ("bonferroni", "wald"), "joint", where)
    rs = tuple(_check_int(r, "moment", where, 1) for r in moments)
    if not rs or len(set(rs)) != len(rs):
        raise ValueError(f"{where}: moments must be distinct positive integers; got {moments!r}")
    u = np.asarray(pit, dtype=np.float64).ravel()
    keep = ~np.isnan(u)
    pos = None if positions is None else np.asarray(positions)[keep]
    u = u[keep]
    if ((u < 0) | (u > 1)).any():
        raise ValueError(f"{where}: PIT values must lie in [0, 1]; got min {u.min()!r}, max {u.max()!r}")
    t, k = u.size, len(rs)
    nan = float("nan")
    if method == "fixed_m":
        from harness.compare.dm import default_bandwidth

        bw = default_bandwidth("fixed_m", max(t, 1)) if bandwidth is None else \
            _check_int(bandwidth, "bandwidth", where, 1)
    else:
        bw = h - 1 if bandwidth is None else _check_int(bandwidth, "bandwidth", where, 0)

    def empty(note: str, dev=None) -> RawMomentResult:
        dev = np.full(k, nan) if dev is None else dev
        return RawMomentResult(nan, nan, t, h, rs, dev, method, bw, "", note)

    if method == "fixed_m" and not ((2 * bw >= k or joint == "bonferroni") and bw <= (t - 1) // 2):
        return empty(f"T = {t} gives m = {bw} Fourier frequencies; {k} moments need 2m >= {k} "
                     f"and T >= 2m + 1")
    if t <= h or t < 3:
        return empty(f"only {t} PIT value(s) at h = {h}")
    s = math.sqrt(12.0) * (u - 0.5)
    g = np.column_stack([s**r - _uniform_raw_moment(r) for r in rs])
    dev = g.mean(axis=0)
    if method == "fixed_m":
        omega = daniell_covariance(g, bw, positions=pos)
    else:
        omega = long_run_covariance(g, bw, "bartlett", positions=pos)
    scale = np.mean(g * g, axis=0)
    # the same relative tolerance as the DM test, per moment (see harness.compare.dm)
    tol = 1e-12
    if joint == "bonferroni":
        var = np.diag(omega)
        if not ((scale > 0) & (var > tol * scale)).all():
            return empty("a moment series of the PITs has zero long-run variance (no variation); "
                         "the test is undefined", dev)
        tr = math.sqrt(t) * dev / np.sqrt(var)
        if method == "fixed_m":
            pr = 2.0 * special.stdtr(2.0 * bw, -np.abs(tr))
            law = f"Bonferroni over {k} t({2 * bw})"
        else:
            pr = 2.0 * special.ndtr(-np.abs(tr))
            law = f"Bonferroni over {k} N(0, 1)"
        stat = float(np.max(np.abs(tr)))
        p = float(min(1.0, k * float(np.min(pr))))
        return RawMomentResult(stat, p, t, h, rs, dev, method, bw, law)
    eig = np.linalg.eigvalsh(omega / np.sqrt(np.outer(scale, scale))) if (scale > 0).all() else [0.0]
    if not np.min(eig) > tol:
        return empty("the PITs' moment series have a singular long-run covariance (no variation "
                     "or collinear moments); the test is undefined", dev)
    stat = float(t * dev @ np.linalg.solve(omega, dev))
    if method == "fixed_m":
        big_k = 2 * bw
        f = (big_k - k + 1) / (big_k * k) * stat
        p = float(special.fdtrc(k, big_k - k + 1, f))
        law = f"F({k}, {big_k - k + 1})"
    else:
        p = chi2_sf(stat, k)
        law = f"chi2({k})"
    return RawMomentResult(stat, p, t, h, rs, dev, method, bw, law)


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
