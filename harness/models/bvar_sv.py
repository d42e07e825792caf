"""Bayesian VAR with stochastic volatility (random-walk log-volatilities), by Gibbs sampling.

Model (Cogley & Sargent 2005; Carriero, Clark & Marcellino 2019):

.. math::

    y_t = B'x_t + u_t, \\quad A u_t = \\Lambda_t^{1/2}\\varepsilon_t, \\quad
    \\Lambda_t = \\operatorname{diag}(e^{h_{1t}}, \\dots, e^{h_{nt}}), \\quad
    h_{it} = h_{i,t-1} + \\eta_{it},\\ \\eta_{it} \\sim N(0, \\phi_i),

with ``A`` unit lower triangular, so :math:`\\Sigma_t = A^{-1}\\Lambda_t A^{-1\\prime}`.

Priors: independent Minnesota-type normal on the coefficients (own first lag mean ``m_i``; s.d.
``lambda / l^d`` on own lags, ``lambda * cross / l^d * s_i / s_j`` on other variables' lags, a
nearly flat intercept); ``a_ij ~ N(0, a_prior_var)``; ``phi_i`` scaled inverse chi-square with
``vol_var_df`` degrees of freedom and scale ``vol_var_scale``; ``h_{i1} ~ N(log s_i^2, 4)`` with
``s_i^2`` the variance of the initial orthogonalised residuals (common practice).

Gibbs blocks, in the order required by Del Negro & Primiceri (2015):

1. ``B`` equation by equation with the triangular factorisation: the conditional posterior of
   equation ``i``'s coefficients combines equations ``j >= i`` of the orthogonalised system
   (the corrected triangular algorithm of Carriero, Chan, Clark & Marcellino 2022); ``k x k``
   solves instead of one ``nk x nk`` solve;
2. the free elements of ``A``, row by row (weighted least squares);
3. the mixture indicators of the Kim, Shephard & Chib (1998) 7-component approximation of
   ``log chi^2_1`` (inverse CDF per equation and period);
4. all log-volatility paths by the precision sampler (Chan & Jeliazkov 2009): the posterior
   precision is tridiagonal per equation, factorised by a banded Cholesky;
5. ``phi_i`` (conjugate inverse gamma).

Implementation: :func:`sv_gibbs` runs the iterations in one numba-compiled kernel (cached on
disk; the first call in a fresh environment compiles it, some seconds), fed with random numbers
drawn in Python in the same order as the block-by-block NumPy/SciPy reference
(``sv_gibbs(..., reference=True)``, built from :func:`draw_coefficients`, :func:`draw_impacts`
and :func:`sample_log_volatility`). A seed therefore gives the same draws in both up to floating
point rounding, not bit for bit; in a strongly persistent chain rounding differences can grow
until an indicator draw differs, after which the two chains are different draws from the same
posterior.

Predictive draws simulate future log-volatilities and, like :class:`BayesianVAR`, condition on
the observed ragged edge (Waggoner & Zha 1999) with the time-varying shock covariances.

References
----------
Kim, S., Shephard, N. and Chib, S. (1998). Stochastic volatility: likelihood inference and
comparison with ARCH models. *Review of Economic Studies* 65(3), 361-393 (Table 4).
Omori, Y., Chib, S., Shephard, N. and Nakajima, J. (2007). Stochastic volatility with leverage:
fast and efficient likelihood inference. *Journal of Econometrics* 140(2), 425-449 (10-component
table; not used here).
Chan, J. C. C. and Jeliazkov, I. (2009). Efficient simulation and integrated likelihood
estimation in state space models. *International Journal of Mathematical Modelling and
Numerical Optimisation* 1(1/2), 101-120.
Cogley, T. and Sargent, T. J. (2005). Drifts and volatilities: monetary policies and outcomes in
the post WWII US. *Review of Economic Dynamics* 8(2), 262-302.
Carriero, A., Clark, T. E. and Marcellino, M. (2019). Large Bayesian vector autoregressions
with stochastic volatility and non-conjugate priors. *Journal of Econometrics* 212(1), 137-154.
Carriero, A., Chan, J., Clark, T. E. and Marcellino, M. (2022). Corrigendum to "Large Bayesian
vector autoregressions with stochastic volatility and non-conjugate priors". *Journal of
Econometrics* 227(2), 506-512.
Del Negro, M. and Primiceri, G. E. (2015). Time varying structural vector autoregressions and
monetary policy: a corrigendum. *Review of Economic Studies* 82(4), 1342-1345.
Geyer, C. J. (1992). Practical Markov chain Monte Carlo. *Statistical Science* 7(4), 473-483.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from functools import partial

import numpy as np
import scipy.linalg as sla
from scipy.linalg import lapack

from harness.models.base import (
    BaseModel,
    TargetLayout,
    ar1_scales,
    lag_design,
    per_variable,
    register,
)
from harness.models.bvar import ragged_split
from harness.models.conditional import var_paths
from harness.models.errors import ModelParameterError
from harness.models.params import Interval, PerVariable

__all__ = [
    "KSC_MEANS",
    "KSC_OFFSET",
    "KSC_PROBS",
    "KSC_VARIANCES",
    "BayesianVARSV",
    "SVPosterior",
    "effective_sample_size",
    "sample_log_volatility",
]

# Kim, Shephard & Chib (1998), Table 4: the 7-component normal mixture approximating the density
# of log chi^2_1, component j with probability q_j, mean m_j - 1.2704 and variance v_j^2. The
# table's means are for the variate centred at E[log chi^2_1] = -1.2704, hence the offset.
# Values from memory, cross-checked against several independent public copies of the table;
# neither statsmodels nor arch ships them. The tests check their moments against scipy.
KSC_PROBS = np.array([0.00730, 0.10556, 0.00002, 0.04395, 0.34001, 0.24566, 0.25750])
KSC_MEANS = np.array([-10.12999, -3.97281, -8.56686, 2.77786, 0.61942, 1.79518, -1.08819])
KSC_VARIANCES = np.array([5.79596, 2.61369, 5.17950, 0.16735, 0.64009, 0.34023, 1.26261])
KSC_OFFSET = -1.2704

_MIX_MEANS = KSC_MEANS + KSC_OFFSET
_MIX_LOGW = np.log(KSC_PROBS) - 0.5 * np.log(KSC_VARIANCES)
_LOGSQ_OFFSET = 1e-6  # keeps log(e^2) finite for an exactly zero residual (common practice)
_H1_PRIOR_VAR = 4.0
_CONST_VAR = 1e4  # prior variance of the intercepts relative to s_i^2: nearly flat


def effective_sample_size(x: np.ndarray) -> np.ndarray:
    """Effective sample size of MCMC draws by Geyer's initial positive sequence estimator.

    Parameters
    ----------
    x : ndarray (M,) or (M, m)
        Draws in iteration order (columns are separate chains of scalars).

    Returns
    -------
    ndarray () or (m,)
        ``M / tau`` with ``tau = -1 + 2 sum_k (rho_{2k} + rho_{2k+1})`` summed while the pair sums
        stay positive; NaN for a constant chain.

    References
    ----------
    Geyer, C. J. (1992). Practical Markov chain Monte Carlo. *Statistical Science* 7(4), 473-483.
    """
    x = np.asarray(x, dtype=float)
    one = x.ndim == 1
    x = x[:, None] if one else x
    m = x.shape[0]
    xc = x - x.mean(axis=0)
    f = np.fft.rfft(xc, n=2 * m, axis=0)
    acov = np.fft.irfft(f * np.conj(f), n=2 * m, axis=0)[:m] / m
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = acov / acov[0]
        half = m // 2
        pairs = rho[0: 2 * half: 2] + rho[1: 2 * half: 2]
        keep = np.cumprod(pairs > 0, axis=0).astype(bool)
        tau = -1.0 + 2.0 * np.where(keep, pairs, 0.0).sum(axis=0)
        ess = np.where(acov[0] > 0, m / np.maximum(tau, 1e-12), np.nan)
    return ess[0] if one else ess


def _tridiag_draw_reference(diag: np.ndarray, off: np.ndarray, rhs: np.ndarray,
                            z: np.ndarray) -> np.ndarray:
    """``K^{-1} rhs + L^{-T} z`` for tridiagonal SPD ``K = L L'`` via SciPy's banded routines."""
    ab = np.empty((2, len(diag)))
    ab[0] = diag
    ab[1, :-1] = off
    ab[1, -1] = 0.0
    chol = sla.cholesky_banded(ab, lower=True, check_finite=False)
    mean = sla.cho_solve_banded((chol, True), rhs, check_finite=False)
    up = np.empty_like(chol)  # L' in upper banded storage
    up[0, 0] = 0.0
    up[0, 1:] = chol[1, :-1]
    up[1] = chol[0]
    return mean + sla.solve_banded((0, 1), up, z, check_finite=False)


def _tridiag_draw_loop(diag, off, rhs, z):  # compiled by numba when available
    """Same as the reference: one banded Cholesky pass, then ``L' h = L^{-1} rhs + z``."""
    m = diag.shape[0]
    ld = np.empty(m)
    ls = np.empty(m)
    v = np.empty(m)
    ld[0] = np.sqrt(diag[0])
    v[0] = rhs[0] / ld[0]
    for i in range(1, m):
        ls[i - 1] = off[i - 1] / ld[i - 1]
        ld[i] = np.sqrt(diag[i] - ls[i - 1] * ls[i - 1])
        v[i] = (rhs[i] - ls[i - 1] * v[i - 1]) / ld[i]
    h = np.empty(m)
    h[m - 1] = (v[m - 1] + z[m - 1]) / ld[m - 1]
    for i in range(m - 2, -1, -1):
        h[i] = (v[i] + z[i] - ls[i] * h[i + 1]) / ld[i]
    return h


def _indicators_reference(dev: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Mixture component per cell given ``dev = log e^2 - h`` and uniforms (inverse CDF), NumPy."""
    d = dev[..., None] - _MIX_MEANS
    logp = _MIX_LOGW - 0.5 * d * d / KSC_VARIANCES
    logp -= logp.max(axis=-1, keepdims=True)
    cum = np.cumsum(np.exp(logp), axis=-1)
    return np.minimum((cum < u[..., None] * cum[..., -1:]).sum(axis=-1), len(KSC_PROBS) - 1)


def _indicators_loop(dev, u, means, logw, variances):  # compiled by numba when available
    """Same as the reference, cell by cell."""
    m = dev.shape[0]
    c = means.shape[0]
    out = np.empty(m, dtype=np.int64)
    lp = np.empty(c)
    for t in range(m):
        mx = -np.inf
        for j in range(c):
            d = dev[t] - means[j]
            lp[j] = logw[j] - 0.5 * d * d / variances[j]
            mx = max(mx, lp[j])
        total = 0.0
        for j in range(c):
            lp[j] = total + np.exp(lp[j] - mx)
            total = lp[j]
        thr = u[t] * total
        k = 0
        for j in range(c):
            if lp[j] < thr:
                k += 1
        out[t] = min(k, c - 1)
    return out


def _spd_draw_loop(chol, g, dim, z):  # compiled by numba when available
    """``g <- K^{-1} g + U^{-1} z`` for ``K = U'U`` in ``chol[:dim, :dim]``'s upper triangle.

    Right-looking Cholesky (contiguous inner loops), then ``U'g' = g`` and ``U beta = g' + z``:
    the mean plus the noise in one back substitution. ``chol`` is overwritten by ``U``. Returns
    False, leaving ``g`` undefined, if ``K`` is not positive definite.
    """
    for j in range(dim):
        piv = chol[j, j]
        if not piv > 0.0:  # also catches NaN
            return False
        piv = np.sqrt(piv)
        chol[j, j] = piv
        for q in range(j + 1, dim):
            chol[j, q] /= piv
        for r in range(j + 1, dim):
            f = chol[j, r]
            for q in range(r, dim):
                chol[r, q] -= f * chol[j, q]
    for q in range(dim):
        g[q] /= chol[q, q]
        for r in range(q + 1, dim):
            g[r] -= chol[q, r] * g[q]
    for q in range(dim):
        g[q] += z[q]
    for q in range(dim - 1, -1, -1):
        acc = g[q]
        for m in range(q + 1, dim):
            acc -= chol[q, m] * g[m]
        g[q] = acc / chol[q, q]
    return True


def _coef_sweep_loop(yt, x, xt, xx, b0, inv_v0, coefs, u, a, inv_lam, z, chol, g, e, w_t, xb,
                     v):  # compiled by numba when available
    """Block 1 as :func:`draw_coefficients` (in place); False if a precision is not PD.

    ``xt = x'``; ``xx[t]`` holds ``x_tq x_td`` (``d <= q``) packed by rows; ``e``, ``w_t``,
    ``xb``, ``v`` are work arrays.
    """
    t, n = yt.shape
    k = x.shape[1]
    for s in range(t):
        for j in range(n):
            acc = 0.0
            for m in range(j + 1):
                acc += u[s, m] * a[j, m]
            e[s, j] = acc
    # The weights sum_{j >= i} a_ji^2 / lambda_jt depend on A and h only: every equation's
    # X'WX (packed) in one product before the sweep.
    for i in range(n):
        for s in range(t):
            acc = 0.0
            for j in range(i, n):
                acc += inv_lam[s, j] * (a[j, i] * a[j, i])
            w_t[i, s] = acc
    prec = np.dot(w_t, xx)
    for i in range(n):
        # e_j for j >= i become the partial residuals r_j = e_j + a_ji x'b_i
        for s in range(t):
            xb[s] = 0.0
        for q in range(k):  # x b_i as axpys over contiguous rows of x'
            bq = coefs[q, i]
            for s in range(t):
                xb[s] += xt[q, s] * bq
        for s in range(t):
            acc = 0.0
            for j in range(i, n):
                r = e[s, j] + xb[s] * a[j, i]
                e[s, j] = r
                acc += inv_lam[s, j] * r * a[j, i]
            v[s] = acc
        for q in range(k):
            g[q] = inv_v0[q, i] * b0[q, i]
        for s in range(t):
            for q in range(k):
                g[q] += x[s, q] * v[s]
        p = 0
        for q in range(k):
            for d in range(q + 1):
                chol[d, q] = prec[i, p]
                p += 1
            chol[q, q] += inv_v0[q, i]
        if not _spd_draw_loop(chol, g, k, z[i * k:(i + 1) * k]):
            return False
        for s in range(t):
            xb[s] = 0.0
        for q in range(k):
            coefs[q, i] = g[q]
            for s in range(t):
                xb[s] += xt[q, s] * g[q]
        for s in range(t):
            u[s, i] = yt[s, i] - xb[s]
            for j in range(i, n):
                e[s, j] -= xb[s] * a[j, i]
    return True


def _impact_rows_loop(u, a, inv_lam, a_prior_var, z, chol, g, uu, lam_t):  # compiled by numba
    """Block 2 as :func:`draw_impacts` (in place), ``z`` the ``1 + ... + (n - 1)`` normals.

    Returns False if a precision is not PD; ``uu`` and ``lam_t`` are work arrays.
    """
    t, n = u.shape
    for s in range(t):
        p = 0
        for q in range(n):
            lam_t[q, s] = inv_lam[s, q]
            for d in range(q + 1):
                uu[s, p] = u[s, q] * u[s, d]
                p += 1
    # sum_t u_tq u_td / lambda_it for every row i at once; row i needs the pairs (q, d) with
    # d <= q < i, then (i, q): the first i (i + 3) / 2 packed entries
    prec = np.dot(lam_t, uu)
    off = 0
    for i in range(1, n):
        p = 0
        for q in range(i):
            for d in range(q + 1):
                chol[d, q] = prec[i, p]
                p += 1
            chol[q, q] += 1.0 / a_prior_var
            g[q] = -prec[i, i * (i + 1) // 2 + q]  # the regressors are -u_{<i}
        if not _spd_draw_loop(chol, g, i, z[off:off + i]):
            return False
        for q in range(i):
            a[i, q] = g[q]
        off += i
    return True


def _volatility_loop(ystar, mix_mean, mix_prec, phi, h1_mean, h1_var, z, h, ld, ls,
                     tv):  # compiled by numba when available
    """Block 4 as :func:`sample_log_volatility`, writing ``h``; ``z`` is equation-major.

    The equations' tridiagonal recursions are interleaved (inner loop over equations): each is a
    serial chain over time, so this gives the processor independent work.
    """
    t, n = ystar.shape
    for s in range(t):
        for j in range(n):
            inv_phi = 1.0 / phi[j]
            if s == 0:
                dg = inv_phi + 1.0 / h1_var if t > 1 else 1.0 / h1_var
            elif s == t - 1:
                dg = inv_phi
            else:
                dg = 2.0 * inv_phi
            dg += mix_prec[s, j]
            rs = (ystar[s, j] - mix_mean[s, j]) * mix_prec[s, j]
            if s == 0:
                rs += h1_mean[j] / h1_var
                ld[0, j] = np.sqrt(dg)
                tv[0, j] = rs / ld[0, j]
            else:
                ls[s - 1, j] = -inv_phi / ld[s - 1, j]
                ld[s, j] = np.sqrt(dg - ls[s - 1, j] * ls[s - 1, j])
                tv[s, j] = (rs - ls[s - 1, j] * tv[s - 1, j]) / ld[s, j]
    for j in range(n):
        h[t - 1, j] = (tv[t - 1, j] + z[j * t + t - 1]) / ld[t - 1, j]
    for s in range(t - 2, -1, -1):
        for j in range(n):
            h[s, j] = (tv[s, j] + z[j * t + s] - ls[s, j] * h[s + 1, j]) / ld[s, j]


def _gibbs_loop(yt, x, xt, xx, b0, inv_v0, a_prior_var, vol_sse0, h1_mean, h1_var, coefs, u, a,
                h, phi, z_lin, unif, z_vol, chi, slot, mix_means, mix_logw, mix_vars,
                logsq_offset, keep_coefs, keep_a, keep_h,
                keep_phi):  # compiled by numba when available
    """Gibbs iterations, blocks 1-5 as in :func:`_gibbs_reference`, from pre-drawn random numbers.

    The state ``coefs, u, a, h, phi`` is updated in place; iteration ``it`` uses ``z_lin[it]``
    (``n k`` coefficient normals, then ``1 + ... + (n - 1)`` impact normals), ``unif[it]``,
    ``z_vol[it]`` (equation major) and ``chi[it]``, and is stored in the ``keep_*`` arrays at
    ``slot[it]`` unless that is negative. Returns ``(0, 0)``, or ``(block, it)`` at the first
    posterior precision that is not positive definite (block 1: coefficients, 2: impacts).
    """
    t, n = yt.shape
    k = x.shape[1]
    nk = n * k
    inv_lam = np.empty((t, n))
    chol = np.empty((k, k))
    g = np.empty(k)
    e = np.empty((t, n))
    w_t = np.empty((n, t))
    xb = np.empty(t)
    v = np.empty(t)
    uu = np.empty((t, n * (n + 1) // 2))
    dev = np.empty(t * n)
    ystar = np.empty((t, n))
    mix_mean = np.empty((t, n))
    mix_prec = np.empty((t, n))
    ld = np.empty((t, n))
    ls = np.empty((t, n))
    tv = np.empty((t, n))
    for it in range(z_lin.shape[0]):
        for s in range(t):
            for j in range(n):
                inv_lam[s, j] = np.exp(-h[s, j])
        # 1.-2. coefficients equation by equation, then the free elements of A row by row
        if not _coef_sweep_loop(yt, x, xt, xx, b0, inv_v0, coefs, u, a, inv_lam, z_lin[it, :nk],
                                chol, g, e, w_t, xb, v):
            return 1, it
        if not _impact_rows_loop(u, a, inv_lam, a_prior_var, z_lin[it, nk:], chol, g, uu, w_t):
            return 2, it
        # 3. mixture indicators given e = A u
        for s in range(t):
            for j in range(n):
                acc = 0.0
                for m in range(j + 1):
                    acc += u[s, m] * a[j, m]
                ys = np.log(acc * acc + logsq_offset)
                ystar[s, j] = ys
                dev[s * n + j] = ys - h[s, j]
        comp = _indicators_loop(dev, unif[it], mix_means, mix_logw, mix_vars)
        for s in range(t):
            for j in range(n):
                mix_mean[s, j] = mix_means[comp[s * n + j]]
                mix_prec[s, j] = 1.0 / mix_vars[comp[s * n + j]]
        # 4. log-volatility paths
        _volatility_loop(ystar, mix_mean, mix_prec, phi, h1_mean, h1_var, z_vol[it], h, ld, ls, tv)
        # 5. log-volatility innovation variances (scaled inverse chi-square)
        for j in range(n):
            sse = 0.0
            for s in range(t - 1):
                dh = h[s + 1, j] - h[s, j]
                sse += dh * dh
            phi[j] = (vol_sse0 + sse) / chi[it, j]
        kept = slot[it]
        if kept >= 0:  # element loops: array-to-slice assignment is slow to compile
            for j in range(n):
                keep_phi[kept, j] = phi[j]
                for q in range(k):
                    keep_coefs[kept, q, j] = coefs[q, j]
                for q in range(n):
                    keep_a[kept, j, q] = a[j, q]
                for s in range(t):
                    keep_h[kept, s, j] = h[s, j]
    return 0, 0


# compiled by _fast_kernels in this order (callees before their callers)
_KERNELS = ("_tridiag_draw_loop", "_indicators_loop", "_spd_draw_loop", "_coef_sweep_loop",
            "_impact_rows_loop", "_volatility_loop", "_gibbs_loop")
_FAST: dict[str, object] = {}
_FAST_LOCK = threading.Lock()


def _fast_kernels() -> dict[str, object]:
    """numba-compiled kernels (cached on disk), or the NumPy/SciPy references without numba.

    The ``*_loop`` kernels are plain Python. They are wrapped here, callees first, and the module
    names rebound to the compiled functions, so that a compiled kernel calling another resolves
    to compiled code (numba reads globals when it compiles, at the first call) while importing
    this module does not import numba.
    """
    with _FAST_LOCK:  # no thread may see _FAST before every name is rebound
        if _FAST:
            return _FAST
        try:
            import numba
        except ImportError:  # pragma: no cover - numba is a declared dependency
            _FAST["tridiag"] = _tridiag_draw_reference
            _FAST["indicators"] = _indicators_reference
            _FAST["gibbs"] = None  # sv_gibbs falls back to the NumPy/SciPy blocks
            return _FAST
        module = globals()
        for name in _KERNELS:
            if not hasattr(module[name], "py_func"):  # not wrapped yet
                module[name] = numba.njit(cache=True)(module[name])
        ind = module["_indicators_loop"]
        _FAST["tridiag"] = module["_tridiag_draw_loop"]
        _FAST["indicators"] = lambda dev, u: ind(dev.ravel(), u.ravel(), _MIX_MEANS, _MIX_LOGW,
                                                 KSC_VARIANCES).reshape(dev.shape)
        _FAST["gibbs"] = module["_gibbs_loop"]
        return _FAST


def sample_log_volatility(ystar: np.ndarray, mix_means: np.ndarray, mix_vars: np.ndarray,
                          phi: np.ndarray, h1_mean: np.ndarray, h1_var: float,
                          rng: np.random.Generator, *, reference: bool = False) -> np.ndarray:
    """Draw random-walk log-volatility paths given the mixture indicators (precision sampler).

    ``ystar_it = h_it + mu_it + N(0, v_it)`` with ``h_it = h_{i,t-1} + N(0, phi_i)`` and
    ``h_i1 ~ N(h1_mean_i, h1_var)``. The posterior precision of each path is tridiagonal; the
    ``n`` paths are stacked into one block-tridiagonal (hence banded) system of size ``nT``,
    factorised once: ``h = K^{-1} b + L^{-T} z`` with ``K = L L'``.

    Parameters
    ----------
    ystar : ndarray (T, n)
    mix_means, mix_vars : ndarray (T, n)
        Mean and variance of the selected mixture component per cell.
    phi : ndarray (n,)
    h1_mean : ndarray (n,)
    h1_var : float
    rng : numpy.random.Generator
    reference : bool, default False
        Use SciPy's banded Cholesky instead of the compiled kernel (same draws up to rounding).

    Returns
    -------
    ndarray (T, n)

    References
    ----------
    Chan & Jeliazkov (2009), *Int. J. Mathematical Modelling and Numerical Optimisation* 1, 101-120;
    Kim, Shephard & Chib (1998), *Review of Economic Studies* 65(3), 361-393.
    """
    t, n = ystar.shape
    prec_obs = 1.0 / mix_vars.T  # (n, T)
    inv_phi = 1.0 / phi
    diag = np.empty((n, t))
    diag[:] = 2.0 * inv_phi[:, None]
    diag[:, -1] = inv_phi
    diag[:, 0] = inv_phi + 1.0 / h1_var if t > 1 else 1.0 / h1_var
    diag += prec_obs
    off = np.empty((n, t))
    off[:, :-1] = -inv_phi[:, None]
    off[:, -1] = 0.0  # no coupling between equations
    rhs = (ystar - mix_means).T * prec_obs
    rhs[:, 0] += h1_mean / h1_var
    z = rng.standard_normal(n * t)
    draw = _tridiag_draw_reference if reference else _fast_kernels()["tridiag"]
    h = draw(diag.ravel(), off.ravel()[:-1].copy(), rhs.ravel(), z)
    return h.reshape(n, t).T


def _gaussian_draw(prec: np.ndarray, rhs: np.ndarray, z: np.ndarray) -> np.ndarray:
    """A draw from ``N(K^{-1} rhs, K^{-1})``: ``K^{-1} rhs + L^{-T} z`` with ``K = L L'`` (LAPACK)."""
    chol, info = lapack.dpotrf(prec, lower=1, clean=1)
    if info != 0:
        raise np.linalg.LinAlgError(f"posterior precision is not positive definite (dpotrf info={info})")
    mean, _ = lapack.dpotrs(chol, rhs, lower=1)
    noise, _ = lapack.dtrtrs(chol, z, lower=1, trans=1)
    return mean + noise


def draw_coefficients(yt: np.ndarray, x: np.ndarray, coefs: np.ndarray, u: np.ndarray,
                      a: np.ndarray, inv_lam: np.ndarray, b0: np.ndarray, inv_v0: np.ndarray,
                      z: np.ndarray) -> None:
    """One sweep over equations of the coefficient block, updating ``coefs`` and ``u`` in place.

    With ``e_t = A u_t ~ N(0, Lambda_t)``, equation ``i``'s coefficients ``b_i`` enter every
    ``e_jt`` with ``j >= i`` through ``-a_ji x_t'b_i``. Given the other equations' coefficients,
    ``b_i`` has a normal conditional with precision
    ``V_i^{-1} + X' diag(sum_{j>=i} a_ji^2 / lambda_jt) X`` and mean from
    ``V_i^{-1} b0_i + X' sum_{j>=i} a_ji r_j / lambda_j``, where ``r_j = e_j + a_ji X b_i``
    (Carriero, Chan, Clark & Marcellino 2022, correcting the 2019 algorithm that used
    equation ``i`` alone).

    Parameters
    ----------
    yt : ndarray (T, n)
    x : ndarray (T, k)
    coefs : ndarray (k, n)
        Current coefficients (updated in place).
    u : ndarray (T, n)
        ``yt - x @ coefs`` (updated in place).
    a : ndarray (n, n)
        Unit lower-triangular ``A``.
    inv_lam : ndarray (T, n)
        ``exp(-h)``.
    b0, inv_v0 : ndarray (k, n)
        Prior means and precisions (independent normal prior).
    z : ndarray (n, k)
        Standard normal draws.

    References
    ----------
    Carriero, Chan, Clark & Marcellino (2022), *Journal of Econometrics* 227(2), 506-512;
    Carriero, Clark & Marcellino (2019), *Journal of Econometrics* 212(1), 137-154.
    """
    n = yt.shape[1]
    k = x.shape[1]
    e = u @ a.T
    diag = np.diag_indices(k)
    for i in range(n):
        ai = a[i:, i]  # a_ji for j >= i (a_ii = 1)
        xb = x @ coefs[:, i]
        r = e[:, i:] + xb[:, None] * ai[None, :]
        w = inv_lam[:, i:] @ (ai * ai)
        prec = (x * w[:, None]).T @ x
        prec[diag] += inv_v0[:, i]
        rhs = x.T @ ((inv_lam[:, i:] * r) @ ai) + inv_v0[:, i] * b0[:, i]
        coefs[:, i] = _gaussian_draw(prec, rhs, z[i])
        xb = x @ coefs[:, i]
        u[:, i] = yt[:, i] - xb
        e[:, i:] = r - xb[:, None] * ai[None, :]


def draw_impacts(u: np.ndarray, a: np.ndarray, inv_lam: np.ndarray, prior_var: float,
                 rng: np.random.Generator) -> None:
    """Draw the free elements of ``A`` row by row in place: ``u_i = -u_{<i}' a_i + e^{h_i/2} eps``."""
    n = u.shape[1]
    for i in range(1, n):
        zr = -u[:, :i]
        wz = zr * inv_lam[:, i:i + 1]
        prec = wz.T @ zr + np.eye(i) / prior_var
        a[i, :i] = _gaussian_draw(prec, wz.T @ u[:, i], rng.standard_normal(i))


@dataclass(frozen=True)
class SVPosterior:
    """Kept Gibbs draws of the BVAR-SV.

    Attributes
    ----------
    coefs : ndarray (M, k, n)
    a : ndarray (M, n, n)
        Unit lower-triangular ``A`` draws.
    log_vol : ndarray (M, T, n)
        Log-volatility paths over the estimation sample.
    phi : ndarray (M, n)
        Variances of the log-volatility innovations.
    """

    coefs: np.ndarray
    a: np.ndarray
    log_vol: np.ndarray
    phi: np.ndarray


def _minnesota_independent(n: int, lags: int, tightness: float, cross: float, lag_decay: float,
                           prior_mean: np.ndarray, scales: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Prior means and variances ``(k, n)`` of the non-conjugate Minnesota-type prior."""
    k = n * lags + 1
    mean = np.zeros((k, n))
    mean[np.arange(n), np.arange(n)] = prior_mean
    var = np.empty((k, n))
    for lag in range(1, lags + 1):
        sd = tightness / lag ** lag_decay
        # row j (regressor: variable j at this lag), column i (equation i)
        block = (sd * cross) ** 2 * (scales[None, :] / scales[:, None]) ** 2
        block[np.arange(n), np.arange(n)] = sd ** 2
        var[(lag - 1) * n: lag * n] = block
    var[-1] = _CONST_VAR * scales ** 2
    return mean, var


_CHUNK_DOUBLES = 1 << 20  # pre-drawn random numbers held at once by the compiled sampler (8 MB)


def _gibbs_reference(yt: np.ndarray, x: np.ndarray, b0: np.ndarray, inv_v0: np.ndarray,
                     a_prior_var: float, vol_var_df: float, vol_var_scale: float,
                     h1_mean: np.ndarray, coefs: np.ndarray, u: np.ndarray, a: np.ndarray,
                     h: np.ndarray, phi: np.ndarray, slot: np.ndarray, keep: tuple,
                     rng: np.random.Generator) -> None:
    """The Gibbs iterations block by block with NumPy/SciPy (the obviously-correct reference)."""
    t, n = yt.shape
    k = x.shape[1]
    keep_coefs, keep_a, keep_h, keep_phi = keep
    for it in range(slot.shape[0]):
        inv_lam = np.exp(-h)  # (T, n)
        # 1. coefficients, equation by equation (corrected triangular algorithm)
        draw_coefficients(yt, x, coefs, u, a, inv_lam, b0, inv_v0, rng.standard_normal((n, k)))
        # 2. free elements of A, row by row
        draw_impacts(u, a, inv_lam, a_prior_var, rng)
        e = u @ a.T
        # 3.-4. mixture indicators, then all log-volatility paths (Del Negro & Primiceri order)
        ystar = np.log(e * e + _LOGSQ_OFFSET)
        comp = _indicators_reference(ystar - h, rng.random((t, n)))
        h = sample_log_volatility(ystar, _MIX_MEANS[comp], KSC_VARIANCES[comp], phi, h1_mean,
                                  _H1_PRIOR_VAR, rng, reference=True)
        # 5. log-volatility innovation variances
        dh = np.diff(h, axis=0)
        phi = (vol_var_df * vol_var_scale + (dh * dh).sum(axis=0)) / rng.chisquare(
            vol_var_df + t - 1, size=n)
        if slot[it] >= 0:
            kept = slot[it]
            keep_coefs[kept], keep_a[kept], keep_h[kept], keep_phi[kept] = coefs, a, h, phi


def _gibbs_compiled(kernel, yt: np.ndarray, x: np.ndarray, b0: np.ndarray, inv_v0: np.ndarray,
                    a_prior_var: float, vol_var_df: float, vol_var_scale: float,
                    h1_mean: np.ndarray, coefs: np.ndarray, u: np.ndarray, a: np.ndarray,
                    h: np.ndarray, phi: np.ndarray, slot: np.ndarray, keep: tuple,
                    rng: np.random.Generator) -> None:
    """The same iterations by the compiled kernel, fed chunk by chunk with pre-drawn random numbers."""
    t, n = yt.shape
    k = x.shape[1]
    n_iter = slot.shape[0]
    n_lin = n * k + n * (n - 1) // 2
    chunk = max(1, min(n_iter, _CHUNK_DOUBLES // (n_lin + 2 * t * n + n)))
    z_lin = np.empty((chunk, n_lin))
    unif = np.empty((chunk, t * n))  # row-major over (T, n), as the reference's (T, n) draw
    z_vol = np.empty((chunk, n * t))
    chi = np.empty((chunk, n))
    chi_df = vol_var_df + t - 1
    lo, hi = np.tril_indices(k)
    # C order throughout: one compiled specialisation
    xx = np.ascontiguousarray(x[:, lo] * x[:, hi])  # x_tq x_td for d <= q, packed by rows
    xt = np.ascontiguousarray(x.T)
    for start in range(0, n_iter, chunk):
        m = min(chunk, n_iter - start)
        # One iteration's draws in the reference's order (its normals for B and for A are one
        # contiguous run of the stream), so a seed gives the same random numbers in both paths.
        # The Python loop is over iterations, not cells: four generator calls each.
        for j in range(m):
            rng.standard_normal(out=z_lin[j])
            rng.random(out=unif[j])
            rng.standard_normal(out=z_vol[j])
            chi[j] = rng.chisquare(chi_df, size=n)
        block, at = kernel(yt, x, xt, xx, b0, inv_v0, a_prior_var, vol_var_df * vol_var_scale,
                           h1_mean, _H1_PRIOR_VAR, coefs, u, a, h, phi, z_lin[:m], unif[:m], z_vol[:m],
                           chi[:m], slot[start:start + m], _MIX_MEANS, _MIX_LOGW, KSC_VARIANCES,
                           _LOGSQ_OFFSET, *keep)
        if block:
            what = "coefficient" if block == 1 else "impact (A)"
            raise np.linalg.LinAlgError(f"{what} posterior precision is not positive definite "
                                        f"at Gibbs iteration {start + at}")


def sv_gibbs(y: np.ndarray, lags: int, prior_mean_coef: np.ndarray, prior_var_coef: np.ndarray,
             a_prior_var: float, vol_var_df: float, vol_var_scale: float, n_iter: int, burn: int,
             thin: int, rng: np.random.Generator, *, reference: bool = False) -> SVPosterior:
    """Gibbs sampler of the BVAR-SV on a balanced sample ``(T + p, n)``; see the module docstring.

    Parameters
    ----------
    y : ndarray (T + p, n)
    lags : int
    prior_mean_coef, prior_var_coef : ndarray (k, n)
        Independent normal prior on the coefficients (``k = n p + 1``, intercept last).
    a_prior_var, vol_var_df, vol_var_scale : float
        See :class:`BayesianVARSV`.
    n_iter, burn, thin : int
    rng : numpy.random.Generator
    reference : bool, default False
        Run the blocks with NumPy/SciPy (:func:`draw_coefficients`, :func:`draw_impacts`, the
        NumPy indicator draw, SciPy's banded Cholesky) instead of the compiled kernel. Both
        consume the generator identically, so a seed gives the same draws up to rounding.

    Returns
    -------
    SVPosterior

    Raises
    ------
    numpy.linalg.LinAlgError
        If a conditional posterior precision is not positive definite.

    References
    ----------
    See the module docstring (Cogley & Sargent 2005; Carriero, Clark & Marcellino 2019;
    Carriero, Chan, Clark & Marcellino 2022; Del Negro & Primiceri 2015).
    """
    yt, x = lag_design(y, lags)
    yt, x = np.ascontiguousarray(yt, dtype=float), np.ascontiguousarray(x, dtype=float)
    t, n = yt.shape
    k = x.shape[1]
    b0 = np.ascontiguousarray(prior_mean_coef, dtype=float)
    inv_v0 = np.ascontiguousarray(1.0 / np.asarray(prior_var_coef, dtype=float))
    # start from the homoskedastic posterior mean of each equation (s_i^2 from AR(1) fits)
    s2 = ar1_scales(y) ** 2
    xtx, xty = x.T @ x, x.T @ yt
    coefs = np.empty((k, n))
    for i in range(n):
        coefs[:, i] = np.linalg.solve(xtx / s2[i] + np.diag(inv_v0[:, i]),
                                      xty[:, i] / s2[i] + inv_v0[:, i] * b0[:, i])
    u = yt - x @ coefs
    cov = u.T @ u / t + 1e-10 * np.eye(n)
    lchol = np.linalg.cholesky(cov)
    d = np.diag(lchol)
    # unit lower triangular with exact zeros and ones (the compiled kernel skips the upper part)
    a = np.ascontiguousarray(sla.solve_triangular(lchol / d, np.eye(n), lower=True,
                                                  unit_diagonal=True, check_finite=False))
    h1_mean = np.log(d ** 2)
    h = np.broadcast_to(h1_mean, (t, n)).copy()
    phi = np.full(n, float(vol_var_scale))
    n_keep = (n_iter - burn) // thin
    keep = (np.empty((n_keep, k, n)), np.empty((n_keep, n, n)), np.empty((n_keep, t, n)),
            np.empty((n_keep, n)))
    # slot[it]: where iteration it is stored (burn, burn + thin, ...), -1 if it is not kept
    slot = np.full(n_iter, -1, dtype=np.int64)
    slot[burn + thin * np.arange(n_keep)] = np.arange(n_keep)
    kernel = None if reference else _fast_kernels()["gibbs"]
    run = _gibbs_reference if kernel is None else partial(_gibbs_compiled, kernel)
    run(yt, x, b0, inv_v0, float(a_prior_var), float(vol_var_df), float(vol_var_scale), h1_mean,
        coefs, u, a, h, phi, slot, keep, rng)
    return SVPosterior(*keep)


@register
class BayesianVARSV(BaseModel):
    """BVAR with random-walk stochastic volatility (Gibbs sampler); see the module docstring.

    Parameters
    ----------
    lags : int, default 4
    tightness : float, default 0.2
        Prior s.d. ``lambda`` of own-lag coefficients at lag 1.
    cross : float, default 0.5
        Relative prior s.d. of other variables' lags (free here: the prior is not conjugate).
    lag_decay : float, default 1.0
    prior_mean : float or dict, default 0.0
        Prior mean of own first lags (1 for levels, 0 for growth rates).
    a_prior_var : float, default 10.0
        Prior variance of the free elements of ``A``.
    vol_var_df, vol_var_scale : float, default 5.0 and 0.01
        ``phi_i ~ vol_var_df * vol_var_scale / chi^2_{vol_var_df}`` (scaled inverse chi-square).
    n_iter, burn, thin : int, default 1500, 500, 1
        Gibbs iterations, burn-in, thinning: ``(n_iter - burn) // thin`` kept draws. The default
        fits 4 variables x 2 lags x 120 quarters in about 0.3 s on one core
        (``scripts/bench_models.py``), once the kernel is compiled.

    Attributes
    ----------
    posterior_ : SVPosterior
        Kept draws after :meth:`forecast`.
    diagnostics_ : dict
        ``{"ess": {parameter: effective sample size}, "min_ess": ..., "n_kept": ...}`` for the
        own first-lag coefficients, the last log-volatilities and the ``phi_i``.

    Notes
    -----
    Estimation uses the balanced block (see :class:`BayesianVAR`), which needs at least
    ``lags + 3`` rows. Stationarity is not imposed. On a ragged edge the tail is conditioned on
    exactly given each draw's future volatilities, which are simulated from the random walk and
    not updated by the observed tail values (an approximation, negligible for short tails). When ``n_draws`` exceeds the kept Gibbs draws,
    the kept draws are resampled with replacement (each with its own future shocks).
    """

    name = "bvar_sv"
    version = "1"
    param_constraints = {
        "lags": [Interval(int, 1, None)],
        "tightness": [Interval(float, 0, None, closed="neither")],
        "cross": [Interval(float, 0, None, closed="neither")],
        "lag_decay": [Interval(float, 0, None)],
        "prior_mean": [Interval(float), PerVariable(Interval(float))],
        "a_prior_var": [Interval(float, 0, None, closed="neither")],
        "vol_var_df": [Interval(float, 0, None, closed="neither")],
        "vol_var_scale": [Interval(float, 0, None, closed="neither")],
        "n_iter": [Interval(int, 1, None)],
        "burn": [Interval(int, 0, None)],
        "thin": [Interval(int, 1, None)],
    }

    def __init__(self, lags: int = 4, tightness: float = 0.2, cross: float = 0.5,
                 lag_decay: float = 1.0, prior_mean: float | dict = 0.0, a_prior_var: float = 10.0,
                 vol_var_df: float = 5.0, vol_var_scale: float = 0.01, n_iter: int = 1500,
                 burn: int = 500, thin: int = 1):
        self.lags = lags
        self.tightness = tightness
        self.cross = cross
        self.lag_decay = lag_decay
        self.prior_mean = prior_mean
        self.a_prior_var = a_prior_var
        self.vol_var_df = vol_var_df
        self.vol_var_scale = vol_var_scale
        self.n_iter = n_iter
        self.burn = burn
        self.thin = thin

    @classmethod
    def check_params(cls, params: dict, model: str) -> None:
        """At least one Gibbs draw must be kept after burn-in and thinning."""
        n_iter, burn, thin = (int(params.get(k, d)) for k, d in (("n_iter", 1500), ("burn", 500),
                                                                 ("thin", 1)))
        if (n_iter - burn) // thin < 1:
            raise ModelParameterError(f"model {model!r}: parameter 'n_iter' must be large enough to "
                                      f"keep a draw after burn={burn} with thin={thin}; got {n_iter}")

    def fit_sample(self, y: np.ndarray, variables: list[str], rng: np.random.Generator) -> SVPosterior:
        """Run the Gibbs sampler on a balanced sample ``(T, n)``; sets ``posterior_`` and ``diagnostics_``."""
        self.validate()
        p = int(self.lags)
        if y.shape[0] < p + 3:
            raise self._fail(f"the balanced sample (all {len(variables)} variables observed) needs "
                             f"at least lags + 3 = {p + 3} periods, got {y.shape[0]}")
        n = y.shape[1]
        m = per_variable(self, "prior_mean", self.prior_mean, variables)
        b0, v0 = _minnesota_independent(n, p, float(self.tightness), float(self.cross),
                                        float(self.lag_decay), m, ar1_scales(y))
        post = sv_gibbs(y, p, b0, v0, float(self.a_prior_var), float(self.vol_var_df),
                        float(self.vol_var_scale), int(self.n_iter), int(self.burn), int(self.thin),
                        rng)
        idx = np.arange(n)
        ess = {}
        for label, arr in (("own_lag1", post.coefs[:, idx, idx]), ("log_vol_last", post.log_vol[:, -1]),
                           ("vol_innov_var", post.phi)):
            for v, value in zip(variables, effective_sample_size(arr), strict=True):
                ess[f"{label}[{v}]"] = float(value)
        finite = [v for v in ess.values() if np.isfinite(v)]
        self.posterior_ = post
        self.diagnostics_ = {"ess": ess, "min_ess": float(min(finite)) if finite else float("nan"),
                             "n_kept": int(post.phi.shape[0]), "n_iter": int(self.n_iter),
                             "burn": int(self.burn), "thin": int(self.thin)}
        return post

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Predictive draws ``(draw, variable, horizon)``; see the class docstring."""
        lay, n_draws = layout, layout.n_draws
        start, stop, tail_end = ragged_split(lay.values)
        post = self.fit_sample(lay.values[start:stop], lay.variables, rng)
        steps = lay.steps(lay.ordinals[stop - 1])
        horizon = max(int(steps.max()), tail_end - stop)
        draws = np.zeros((n_draws, *steps.shape))
        if horizon > 0:
            paths = self.simulate(post, lay.values[stop - int(self.lags):stop],
                                  lay.values[stop:tail_end], horizon, n_draws, rng)
            j, k = np.nonzero(steps > 0)
            draws[:, j, k] = paths[:, steps[j, k] - 1, lay.columns[j]]
        return draws

    def simulate(self, post: SVPosterior, init: np.ndarray, tail: np.ndarray, horizon: int,
                 n_draws: int, rng: np.random.Generator) -> np.ndarray:
        """Predictive paths ``(D, horizon, n)`` with simulated future log-volatilities."""
        m = post.phi.shape[0]
        idx = rng.choice(m, size=n_draws, replace=n_draws > m)
        n = post.phi.shape[1]
        h = post.log_vol[idx, -1][:, None, :] + np.cumsum(
            rng.standard_normal((n_draws, horizon, n)) * np.sqrt(post.phi[idx])[:, None, :], axis=1)
        a_inv = np.linalg.inv(post.a[idx])
        factors = a_inv[:, None, :, :] * np.exp(0.5 * h)[:, :, None, :]
        z = rng.standard_normal((n_draws, horizon, n))
        return var_paths(post.coefs[idx], init, factors, z, tail if tail.shape[0] else None)
