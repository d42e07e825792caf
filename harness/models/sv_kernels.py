"""The stochastic-volatility Gibbs sampler's loops, compiled by numba (cached on disk) when first used.

The ``*_loop`` kernels are plain Python here; :func:`_fast_kernels` wraps them, callees first,
and rebinds the module names, so compiled kernels call compiled kernels while importing this
module does not import numba. Each has an obviously-correct NumPy/SciPy twin in
:mod:`harness.models.sv_blocks` (or ``*_reference`` below) that the tests bind it to.
"""

from __future__ import annotations

import threading

import numpy as np
import scipy.linalg as sla

from harness.models.sv_tables import _ACCEPT_TARGET, _MIX_LOGW, _MIX_MEANS, KSC_PROBS, KSC_VARIANCES


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


def _vol_loglik_loop(ystar, mix_mean, mix_prec, j, phi_j, h1_mean_j, h1_var):  # compiled by numba
    """Equation ``j``'s :func:`harness.models.sv_blocks.log_vol_marginal` at ``phi_j``, one banded Cholesky pass."""
    t = ystar.shape[0]
    inv_phi = 1.0 / phi_j
    out = -0.5 * t * np.log(2.0 * np.pi) - 0.5 * np.log(h1_var) - 0.5 * (t - 1) * np.log(phi_j)
    quad = h1_mean_j * h1_mean_j / h1_var
    ld_prev = 1.0
    v_prev = 0.0
    for s in range(t):
        if s == 0:
            dg = inv_phi + 1.0 / h1_var if t > 1 else 1.0 / h1_var
        elif s == t - 1:
            dg = inv_phi
        else:
            dg = 2.0 * inv_phi
        pr = mix_prec[s, j]
        dg += pr
        r = ystar[s, j] - mix_mean[s, j]
        b = r * pr
        if s == 0:
            b += h1_mean_j / h1_var
            ld = np.sqrt(dg)
            v = b / ld
        else:
            ls = -inv_phi / ld_prev
            ld = np.sqrt(dg - ls * ls)
            v = (b - ls * v_prev) / ld
        out += 0.5 * np.log(pr) - np.log(ld)
        quad += r * r * pr - v * v
        ld_prev = ld
        v_prev = v
    return out - 0.5 * quad


def _vol_var_loop(ystar, mix_mean, mix_prec, phi, h1_mean, h1_var, vol_var_df, vol_var_scale,
                  log_step, z, unif, gain, accepted):  # compiled by numba when available
    """Block 4 as :func:`harness.models.sv_blocks.draw_vol_var` (in place on ``phi``, ``log_step``).

    ``z`` and ``unif`` hold the steps' normals and uniforms, step major (``S n`` each).
    """
    n = phi.shape[0]
    n_steps = z.shape[0] // n
    for j in range(n):
        lp = np.log(phi[j])
        cur = (_vol_loglik_loop(ystar, mix_mean, mix_prec, j, phi[j], h1_mean[j], h1_var)
               - 0.5 * vol_var_df * lp - 0.5 * vol_var_df * vol_var_scale * np.exp(-lp))
        for step in range(n_steps):
            prop = lp + np.exp(log_step[j]) * z[step * n + j]
            new = (_vol_loglik_loop(ystar, mix_mean, mix_prec, j, np.exp(prop), h1_mean[j], h1_var)
                   - 0.5 * vol_var_df * prop - 0.5 * vol_var_df * vol_var_scale * np.exp(-prop))
            acc = np.log(unif[step * n + j]) < new - cur
            if acc:
                lp = prop
                cur = new
                accepted[j] += 1.0
            if gain > 0.0:
                log_step[j] += gain * ((1.0 if acc else 0.0) - _ACCEPT_TARGET)
        phi[j] = np.exp(lp)


def _gibbs_loop(yt, x, xt, xx, b0, inv_v0, a_prior_var, vol_var_df, vol_var_scale, h1_mean,
                h1_var, coefs, u, a, h, phi, log_step, accepted, z_lin, unif, z_phi, u_phi, z_vol,
                slot, first, burn, mix_means, mix_logw, mix_vars, logsq_offset, keep_coefs,
                keep_a, keep_h, keep_phi):  # compiled by numba when available
    """Gibbs iterations, blocks 1-5 as in :func:`_gibbs_reference`, from pre-drawn random numbers.

    The state ``coefs, u, a, h, phi, log_step`` is updated in place; row ``it`` (iteration
    ``first + it`` of the chain) uses ``z_lin[it]`` (``n k`` coefficient normals, then
    ``1 + ... + (n - 1)`` impact normals), ``unif[it]``, ``z_phi[it]`` and ``u_phi[it]`` (the
    ``phi`` steps, step major), ``z_vol[it]`` (equation major), and is stored in the ``keep_*``
    arrays at ``slot[it]`` unless that is negative; ``accepted`` counts accepted ``phi``
    proposals from iteration ``burn`` on. Returns ``(0, 0)``, or ``(block, it)`` at the first
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
    scratch = np.zeros(n)
    for it in range(z_lin.shape[0]):
        step = first + it
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
        # 4. phi given the indicators with the paths integrated out; 5. the paths given phi
        gain = (step + 1.0) ** -0.6 if step < burn else 0.0
        _vol_var_loop(ystar, mix_mean, mix_prec, phi, h1_mean, h1_var, vol_var_df, vol_var_scale,
                      log_step, z_phi[it], u_phi[it], gain, accepted if step >= burn else scratch)
        _volatility_loop(ystar, mix_mean, mix_prec, phi, h1_mean, h1_var, z_vol[it], h, ld, ls, tv)
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
            "_impact_rows_loop", "_volatility_loop", "_vol_loglik_loop", "_vol_var_loop",
            "_gibbs_loop")
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
