"""Compiled Kalman filter, smoother and observation weights for the dynamic factor model.

The fast twin of the dense references in :mod:`harness.models.dfm_ssm` (tests bind them):

* **univariate treatment** of the observation vector (Koopman & Durbin 2000; Durbin & Koopman
  2012, sec. 6.4): with a diagonal observation covariance each observed value is one scalar
  update, so a period costs ``O(n_t m^2)`` instead of inverting ``F_t``; the log-likelihood,
  filtered and smoothed states are identical;
* **sparse system matrices**: ``Z`` and ``T`` are passed in compressed-row form, so products with
  them cost ``O(nnz * m)``; only ``P N`` (for the smoothed covariances) is a dense ``m^3``
  product;
* **periodic steady state**: the covariance recursions do not depend on the data, only on the
  pattern of missing values. Once the one-step prediction covariance equals the one three
  months earlier (to ``tol`` relative) and the pattern repeats with period three (monthly
  panel, quarterly values every third month), every covariance quantity of the period is a copy
  of the one three months back; the smoother likewise copies ``N`` and the smoothed covariances
  backwards. Only the means are recomputed. ``tol=0`` switches this off (exact recursions);
* only what the EM M-step needs of the smoothed covariances is returned: the block of factor and
  quarterly idiosyncratic states, the covariance of each monthly idiosyncratic term with
  ``f_t``, its variance, and its lag-one autocovariance.

The ``*_loop`` functions are plain Python, compiled by numba (``cache=True``) on first use, so
importing this module does not import numba.

References
----------
Koopman, S. J. and Durbin, J. (2000). Fast filtering and smoothing for multivariate state space
models. *Journal of Time Series Analysis* 21(3), 281-296.
Durbin, J. and Koopman, S. J. (2012). *Time Series Analysis by State Space Methods*, 2nd ed.,
Oxford University Press (sec. 4.7 lag-one covariances, sec. 6.4 univariate treatment).
Koopman, S. J. and Harvey, A. (2003). Computing observation weights for signal extraction and
filtering. *Journal of Economic Dynamics and Control* 27(7), 1317-1333.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass

import numpy as np

from harness.models.dfm_ssm import StateSpace

__all__ = ["FilterOutput", "csr", "filter_fast", "observation_weights", "smooth_fast"]

_LOG2PI = math.log(2.0 * math.pi)
_F_MIN = 1e-12  # a scalar prediction-error variance below this carries no information


def csr(a: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Compressed-row form ``(indptr, indices, values)`` of a dense matrix's nonzeros."""
    rows, cols = np.nonzero(a)
    ptr = np.zeros(a.shape[0] + 1, dtype=np.int64)
    np.add.at(ptr, rows + 1, 1)
    return np.cumsum(ptr), cols.astype(np.int64), np.ascontiguousarray(a[rows, cols], dtype=np.float64)


# ---------------------------------------------------------------------------- loops (compiled)
def _same_mask(obs, t, s):
    for i in range(obs.shape[1]):
        if obs[t, i] != obs[s, i]:
            return False
    return True


def _maxabs_diff(a, b):
    d = 0.0
    s = 0.0
    m = a.shape[0]
    for i in range(m):
        for j in range(m):
            e = abs(a[i, j] - b[i, j])
            if e > d:
                d = e
            if abs(a[i, j]) > s:
                s = abs(a[i, j])
    return d, s


def _tmul_vec(t_ptr, t_idx, t_val, a, out):
    """out = T a."""
    m = a.shape[0]
    for i in range(m):
        s = 0.0
        for k in range(t_ptr[i], t_ptr[i + 1]):
            s += t_val[k] * a[t_idx[k]]
        out[i] = s


def _ttmul_vec(t_ptr, t_idx, t_val, r, out):
    """out = T' r."""
    m = r.shape[0]
    for i in range(m):
        out[i] = 0.0
    for i in range(m):
        for k in range(t_ptr[i], t_ptr[i + 1]):
            out[t_idx[k]] += t_val[k] * r[i]


def _filter_loop(x, obs, z_ptr, z_idx, z_val, h, t_ptr, t_idx, t_val, qs, a1, p1, tol,
                 a_pred, p_pred, p_filt, mk, fk, vk, use, root):  # compiled by numba
    """Univariate Kalman filter with periodic steady-state reuse; returns (llf, heavy steps).

    ``root[t]`` is the step whose covariance quantities (``p_pred``, ``p_filt``, ``mk``, ``fk``,
    ``use``) step ``t`` shares: ``t`` itself when computed, ``root[t - 3]`` when the pattern of
    missing values repeats and the prediction covariance has converged. Only computed steps
    write those arrays; the means are computed at every step.
    """
    nt, n = x.shape
    m = a1.shape[0]
    a = a1.copy()
    P = p1.copy()
    tp = np.empty((m, m))
    anew = np.empty(m)
    mv = np.empty(m)
    llf = 0.0
    heavy = 0
    cur = -1  # >= 0: the current prediction covariance is p_pred[cur] (P not up to date)
    for t in range(nt):
        for j in range(m):
            a_pred[t, j] = a[j]
        copy = False
        if tol > 0.0 and t >= 3 and _same_mask(obs, t, t - 3):
            if cur >= 0:
                copy = True  # the previous step was shared, so this prediction is exact too
            else:
                d, s = _maxabs_diff(P, p_pred[root[t - 3]])
                copy = d <= tol * max(1.0, s)
        if copy:
            rt = root[t - 3]
            root[t] = rt
            for i in range(n):
                if not obs[t, i]:
                    continue
                za = 0.0
                for k in range(z_ptr[i], z_ptr[i + 1]):
                    za += z_val[k] * a[z_idx[k]]
                v = x[t, i] - za
                vk[t, i] = v
                if use[rt, i]:
                    f = fk[rt, i]
                    c = v / f
                    for j in range(m):
                        a[j] += mk[rt, i, j] * c
                    llf -= 0.5 * (_LOG2PI + math.log(f) + v * c)
            _tmul_vec(t_ptr, t_idx, t_val, a, anew)
            a[:] = anew
            cur = root[t - 2]  # the next prediction covariance equals that of step t - 2
            continue
        if cur >= 0:
            P[:, :] = p_pred[cur]
            cur = -1
        heavy += 1
        root[t] = t
        p_pred[t] = P
        for i in range(n):
            if not obs[t, i]:
                use[t, i] = False
                continue
            # M = P z, F = z' M + h, v = x - z' a
            for j in range(m):
                s = 0.0
                for k in range(z_ptr[i], z_ptr[i + 1]):
                    s += P[j, z_idx[k]] * z_val[k]
                mv[j] = s
            f = h[i]
            za = 0.0
            for k in range(z_ptr[i], z_ptr[i + 1]):
                f += z_val[k] * mv[z_idx[k]]
                za += z_val[k] * a[z_idx[k]]
            v = x[t, i] - za
            vk[t, i] = v
            fk[t, i] = f
            mk[t, i] = mv
            if f > 1e-12:
                use[t, i] = True
                c = v / f
                for j in range(m):
                    a[j] += mv[j] * c
                for j in range(m):
                    g = mv[j] / f
                    for k in range(m):
                        P[j, k] -= g * mv[k]
                llf -= 0.5 * (_LOG2PI + math.log(f) + v * c)
            else:
                use[t, i] = False
        p_filt[t] = P
        _tmul_vec(t_ptr, t_idx, t_val, a, anew)
        a[:] = anew
        # P <- T P T' + Q, with T sparse: tp = T P, then P = tp T'
        for i in range(m):
            for j in range(m):
                tp[i, j] = 0.0
            for k in range(t_ptr[i], t_ptr[i + 1]):
                w = t_val[k]
                row = t_idx[k]
                for j in range(m):
                    tp[i, j] += w * P[row, j]
        for i in range(m):
            for b in range(m):
                s = qs[i, b]
                for k in range(t_ptr[b], t_ptr[b + 1]):
                    s += tp[i, t_idx[k]] * t_val[k]
                P[i, b] = s
        for i in range(m):
            for j in range(i + 1, m):
                s = 0.5 * (P[i, j] + P[j, i])
                P[i, j] = s
                P[j, i] = s
    if cur >= 0:
        P[:, :] = p_pred[cur]
    for j in range(m):
        a_pred[nt, j] = a[j]
    p_pred[nt] = P
    root[nt] = nt
    return llf, heavy


def _ttn(t_ptr, t_idx, t_val, N, tn, out):
    """out = T' N T (T sparse), using tn as scratch."""
    m = N.shape[0]
    for i in range(m):
        for j in range(m):
            tn[i, j] = 0.0
            out[i, j] = 0.0
    for a_ in range(m):
        for k in range(t_ptr[a_], t_ptr[a_ + 1]):
            wv = t_val[k]
            row = t_idx[k]
            for j in range(m):
                tn[row, j] += wv * N[a_, j]
    for l_ in range(m):
        for k in range(t_ptr[l_], t_ptr[l_ + 1]):
            wv = t_val[k]
            b_ = t_idx[k]
            for i in range(m):
                out[i, b_] += tn[i, l_] * wv


def _smoother_loop(obs, z_ptr, z_idx, z_val, t_ptr, t_idx, t_val, tol, a_pred, p_pred, p_filt,
                   mk, fk, vk, use, root, bidx, eidx, fidx,
                   mean, v_b, v_ef, v_ee, c_ee, c_fe):  # compiled by numba
    """Univariate state smoother with steady-state reuse; returns the number of heavy steps.

    Step ``t`` reuses step ``t + 3`` (``N``, ``P N`` and the smoothed covariances) when both
    share their filter quantities (``root[t] == root[t + 3]``) and the entering ``N`` agree.
    """
    nt, n = obs.shape
    m = a_pred.shape[1]
    nb = bidx.shape[0]
    ne = eidx.shape[0]
    r_ = fidx.shape[0]
    nr = c_fe.shape[2]
    r = np.zeros(m)
    rt = np.empty(m)
    N = np.zeros((m, m))
    tn = np.empty((m, m))
    nn = np.empty((m, m))
    w = np.empty(m)
    col = np.empty(m)
    sroot = np.empty(nt, dtype=np.int64)
    nin = np.empty((nt, m, m))  # entering N, at computed steps
    nout = np.empty((nt, m, m))  # N after the step's observations, at computed steps
    xr = np.empty((nt, m, m))  # P N, at computed steps
    cur = -1  # >= 0: the entering N equals nin[cur] (N not up to date)
    prev_copy = False
    heavy = 0
    for t in range(nt - 1, -1, -1):
        ft = root[t]
        copy = False
        if tol > 0.0 and t + 3 < nt and root[t + 3] == ft:
            if prev_copy:
                copy = True
            else:
                d, s = _maxabs_diff(N, nin[sroot[t + 3]])
                copy = d <= tol * max(1.0, s)
        if not copy and cur >= 0:
            N[:, :] = nin[cur]
            cur = -1
        for i in range(n - 1, -1, -1):
            if not (obs[t, i] and use[ft, i]):
                continue
            f = fk[ft, i]
            kr = 0.0
            for j in range(m):
                kr += mk[ft, i, j] * r[j]
            c = vk[t, i] / f - kr / f
            for k in range(z_ptr[i], z_ptr[i + 1]):
                r[z_idx[k]] += z_val[k] * c
        P = p_pred[ft]
        if copy:
            sr = sroot[t + 3]
            sroot[t] = sr
            v_b[t] = v_b[t + 3]
            v_ef[t] = v_ef[t + 3]
            v_ee[t] = v_ee[t + 3]
        else:
            heavy += 1
            sroot[t] = t
            sr = t
            nin[t] = N
            for i in range(n - 1, -1, -1):
                if not (obs[t, i] and use[ft, i]):
                    continue
                f = fk[ft, i]
                # N <- z z'/F + L' N L with L = I - K z', K = M / F
                for j in range(m):
                    s = 0.0
                    for l_ in range(m):
                        s += N[j, l_] * mk[ft, i, l_]
                    w[j] = s / f
                cc = 0.0
                for j in range(m):
                    cc += mk[ft, i, j] * w[j]
                cc = cc / f + 1.0 / f
                for k in range(z_ptr[i], z_ptr[i + 1]):
                    zi = z_val[k]
                    row = z_idx[k]
                    for j in range(m):
                        N[row, j] -= zi * w[j]
                for k in range(z_ptr[i], z_ptr[i + 1]):
                    zi = z_val[k]
                    cl = z_idx[k]
                    for j in range(m):
                        N[j, cl] -= w[j] * zi
                for k in range(z_ptr[i], z_ptr[i + 1]):
                    for k2 in range(z_ptr[i], z_ptr[i + 1]):
                        N[z_idx[k], z_idx[k2]] += z_val[k] * z_val[k2] * cc
            nout[t] = N
            X = xr[t]
            # X = P N (P, N symmetric)
            for i in range(m):
                for j in range(m):
                    X[i, j] = 0.0
                for k in range(m):
                    pik = P[i, k]
                    if pik != 0.0:
                        for j in range(m):
                            X[i, j] += pik * N[k, j]
            # V = P - X P at the entries the M-step needs
            for i in range(nb):
                a_ = bidx[i]
                for j in range(nb):
                    b_ = bidx[j]
                    s = P[a_, b_]
                    for k in range(m):
                        s -= X[a_, k] * P[k, b_]
                    v_b[t, i, j] = s
            for i in range(ne):
                a_ = eidx[i]
                s = P[a_, a_]
                for k in range(m):
                    s -= X[a_, k] * P[k, a_]
                v_ee[t, i] = s
                for j in range(r_):
                    b_ = fidx[j]
                    s = P[a_, b_]
                    for k in range(m):
                        s -= X[a_, k] * P[k, b_]
                    v_ef[t, i, j] = s
        prev_copy = copy
        for i in range(m):
            s = a_pred[t, i]
            for j in range(m):
                s += P[i, j] * r[j]
            mean[t, i] = s
        if t >= 1 and ne > 0:
            if copy and root[t - 1] == root[t + 2]:
                c_ee[t] = c_ee[t + 3]
                c_fe[t] = c_fe[t + 3]
            else:
                # Cov(alpha_t, alpha_{t-1} | Y) = (I - P_t N) T P_{t-1|t-1} at (e_i, e_i), (f, e_i)
                X = xr[sr]
                pf = p_filt[root[t - 1]]
                for i in range(ne):
                    e = eidx[i]
                    for a_ in range(m):
                        s = 0.0
                        for k in range(t_ptr[a_], t_ptr[a_ + 1]):
                            s += t_val[k] * pf[t_idx[k], e]
                        col[a_] = s
                    s = col[e]
                    for a_ in range(m):
                        s -= X[e, a_] * col[a_]
                    c_ee[t, i] = s
                    for j in range(nr):
                        s = col[j]
                        for a_ in range(m):
                            s -= X[j, a_] * col[a_]
                        c_fe[t, i, j] = s
        # move to t - 1: r <- T' r, N <- T' N T
        _ttmul_vec(t_ptr, t_idx, t_val, r, rt)
        r[:] = rt
        if t > 0:
            if copy:
                # N_out[t] = N_out[t + 3], so the entering N of t - 1 is that of t + 2
                cur = sroot[t + 2]
            else:
                _ttn(t_ptr, t_idx, t_val, N, tn, nn)
                N[:, :] = nn
    return heavy


def _weights_loop(obs, use, mk, fk, root, z_ptr, z_idx, z_val, t_ptr, t_idx, t_val, tstar, zstar,
                  pstar, w):  # compiled by numba
    """Weights of every observation in the smoothed signal ``zstar' alpha_hat_{tstar}``.

    Forward from ``tstar``: ``beta = P_tstar zstar`` propagated by ``(I - K z')`` and ``T``
    gives the coefficient ``c_s = z_s' beta / F_s`` of each innovation; backward from the end,
    the adjoint ``lambda`` of the predicted state gives ``w_s = K_s' lambda + c_s`` and
    ``lambda <- lambda - z_s w_s`` (reverse-mode differentiation of the filter's mean
    recursion; Koopman & Harvey 2003 derive the same weights by other recursions).
    """
    nt, n = obs.shape
    m = zstar.shape[0]
    beta = np.empty(m)
    bt = np.empty(m)
    c = np.zeros((nt, n))
    for j in range(m):
        s = 0.0
        for k in range(m):
            s += pstar[j, k] * zstar[k]
        beta[j] = s
    for t in range(tstar, nt):
        ft = root[t]
        for i in range(n):
            if not (obs[t, i] and use[ft, i]):
                continue
            f = fk[ft, i]
            zb = 0.0
            for k in range(z_ptr[i], z_ptr[i + 1]):
                zb += z_val[k] * beta[z_idx[k]]
            ci = zb / f
            c[t, i] = ci
            for j in range(m):
                beta[j] -= mk[ft, i, j] / f * zb
        _tmul_vec(t_ptr, t_idx, t_val, beta, bt)
        beta[:] = bt
    lam = np.zeros(m)
    lt = np.empty(m)
    for t in range(nt - 1, -1, -1):
        if t < nt - 1:
            _ttmul_vec(t_ptr, t_idx, t_val, lam, lt)
            lam[:] = lt
        ft = root[t]
        for i in range(n - 1, -1, -1):
            if not (obs[t, i] and use[ft, i]):
                w[t, i] = 0.0
                continue
            f = fk[ft, i]
            kl = 0.0
            for j in range(m):
                kl += mk[ft, i, j] * lam[j]
            wi = kl / f + c[t, i]
            w[t, i] = wi
            for k in range(z_ptr[i], z_ptr[i + 1]):
                lam[z_idx[k]] -= z_val[k] * wi
        if t == tstar:
            for j in range(m):
                lam[j] += zstar[j]


_KERNELS = ("_same_mask", "_maxabs_diff", "_tmul_vec", "_ttmul_vec", "_ttn", "_filter_loop",
            "_smoother_loop", "_weights_loop")
_FAST: dict[str, object] = {}
_LOCK = threading.Lock()


def kernels(reference: bool = False) -> dict[str, object]:
    """The compiled loops (numba, cached on disk), or the plain-Python loops with ``reference``.

    Callees are compiled before their callers and the module names rebound, so a compiled loop
    calling a helper resolves to compiled code (see :mod:`harness.models.bvar_sv`).
    """
    module = globals()
    if reference:
        return {k: getattr(module[k], "py_func", module[k]) for k in _KERNELS}
    with _LOCK:
        if not _FAST:
            import numba

            for name in _KERNELS:
                if not hasattr(module[name], "py_func"):
                    module[name] = numba.njit(cache=True)(module[name])
            _FAST.update({k: module[k] for k in _KERNELS})
    return _FAST


# ---------------------------------------------------------------------------- wrappers
@dataclass
class FilterOutput:
    """Filter quantities kept for the smoother, the draws and the weights (``T`` periods)."""

    llf: float
    a_pred: np.ndarray  # (T + 1, m)
    p_pred: np.ndarray  # (T + 1, m, m), valid at computed steps (read through root)
    p_filt: np.ndarray  # (T, m, m), idem
    mk: np.ndarray  # (T, n, m)  P z per univariate step, idem
    fk: np.ndarray  # (T, n), idem
    vk: np.ndarray  # (T, n) innovations (every step)
    use: np.ndarray  # (T, n) bool, idem
    root: np.ndarray  # (T + 1,) the computed step whose covariance quantities step t shares
    obs: np.ndarray  # (T, n) bool
    heavy: int
    z: tuple
    t: tuple

    def pred_cov(self, t: int) -> np.ndarray:
        """The one-step prediction covariance ``P_t`` (``t = T``: beyond the sample)."""
        return self.p_pred[self.root[t]]


def filter_fast(x: np.ndarray, ss: StateSpace, tol: float = 1e-11, *,
                reference: bool = False) -> FilterOutput:
    """Univariate Kalman filter (compiled); see the module docstring.

    Parameters
    ----------
    x : ndarray (T, n)
        Standardised observations, NaN where missing.
    ss : StateSpace
    tol : float
        Relative tolerance of the periodic steady state (0: exact recursions throughout).
    reference : bool
        Run the same loops as plain Python (slow; for tests).
    """
    k = kernels(reference)
    x = np.ascontiguousarray(x, dtype=np.float64)
    nt, n = x.shape
    m = ss.m
    obs = np.isfinite(x)
    z, tt = csr(ss.Z), csr(ss.T)
    # every entry a later step reads is written first, so the big arrays need no zeroing
    out = FilterOutput(0.0, np.empty((nt + 1, m)), np.empty((nt + 1, m, m)), np.empty((nt, m, m)),
                       np.empty((nt, n, m)), np.zeros((nt, n)), np.zeros((nt, n)),
                       np.zeros((nt, n), dtype=np.bool_), np.full(nt + 1, -1, dtype=np.int64), obs,
                       0, z, tt)
    llf, heavy = k["_filter_loop"](x, obs, *z, np.ascontiguousarray(ss.h), *tt,
                                   np.ascontiguousarray(ss.Q), ss.a1.copy(), ss.P1.copy(), float(tol),
                                   out.a_pred, out.p_pred, out.p_filt, out.mk, out.fk, out.vk,
                                   out.use, out.root)
    out.llf, out.heavy = float(llf), int(heavy)
    return out


@dataclass
class SmoothedMoments:
    """What the M-step needs of the smoothed states (see the module docstring)."""

    mean: np.ndarray  # (T, m)
    v_b: np.ndarray  # (T, nb, nb) covariance of layout.block_states
    v_ef: np.ndarray  # (T, ne, 2r) Cov(e_it, (f_t', f_{t-1}')')
    v_ee: np.ndarray  # (T, ne) Var(e_it)
    c_ee: np.ndarray  # (T, ne) Cov(e_it, e_i,t-1); row 0 unused
    c_fe: np.ndarray  # (T, ne, r) Cov(f_t, e_i,t-1); row 0 unused
    heavy: int = 0


def smooth_fast(fo: FilterOutput, ss: StateSpace, tol: float = 1e-11, *,
                reference: bool = False) -> SmoothedMoments:
    """Univariate state smoother (compiled) returning the M-step's smoothed moments."""
    k = kernels(reference)
    lay = ss.layout
    bidx, eidx = lay.block_states, lay.idio_states
    r = lay.n_factors
    fidx = np.arange(2 * r, dtype=np.int64)
    nt = fo.obs.shape[0]
    ne = len(eidx)
    out = SmoothedMoments(np.empty((nt, ss.m)), np.empty((nt, len(bidx), len(bidx))),
                          np.empty((nt, ne, 2 * r)), np.empty((nt, ne)), np.zeros((nt, ne)),
                          np.zeros((nt, ne, r)))
    out.heavy = int(k["_smoother_loop"](fo.obs, *fo.z, *fo.t, float(tol), fo.a_pred, fo.p_pred,
                                        fo.p_filt, fo.mk, fo.fk, fo.vk, fo.use, fo.root, bidx, eidx,
                                        fidx, out.mean, out.v_b, out.v_ef, out.v_ee, out.c_ee,
                                        out.c_fe))
    return out


def observation_weights(fo: FilterOutput, tstar: int, zstar: np.ndarray, *,
                        reference: bool = False) -> np.ndarray:
    """Weights ``w`` (T, n) with ``zstar' E[alpha_tstar | Y] = sum w * x`` (zero initial mean).

    ``tstar`` must lie inside the filtered sample (extend ``x`` with NaN rows to reach a future
    period). Missing cells get weight 0.
    """
    k = kernels(reference)
    nt = fo.obs.shape[0]
    if not 0 <= tstar < nt:
        raise ValueError(f"observation_weights: tstar must be in [0, {nt}), got {tstar}")
    w = np.zeros(fo.obs.shape)
    k["_weights_loop"](fo.obs, fo.use, fo.mk, fo.fk, fo.root, *fo.z, *fo.t, int(tstar),
                       np.ascontiguousarray(zstar, dtype=np.float64), fo.pred_cov(tstar), w)
    return w
