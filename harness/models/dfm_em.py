"""EM estimation of the mixed-frequency dynamic factor model with missing data.

The expectation-maximisation algorithm of Bańbura & Modugno (2014): the E-step runs the Kalman
smoother at the current parameters; the M-step raises the expected complete-data
log-likelihood in closed form (their eq. 6-13, with the quarterly restrictions of Bańbura,
Giannone & Reichlin 2011, App. C, written as loadings on the aggregate ``sum_k w_k f_{t-k}``).
Sums run over the same periods as statsmodels' ``DynamicFactorMQ`` (``t = 2..T`` for the
transition equations, the observed periods of each series for its loadings); the initial state
is the stationary law at the current parameters and is not itself estimated (statsmodels'
``em_initialization=False``); its dependence on the parameters is left out of the M-step, as
there, so the ascent holds up to that term (small decreases of order 1e-5 can occur near the
optimum).

**Loadings with AR(1) idiosyncratic terms.** With the idiosyncratic terms in the state and no
measurement error, ``x - e = lambda' f`` holds exactly in the complete data ``(f, e)``, and the
textbook update returns the current loadings unchanged: statsmodels' ``DynamicFactorMQ`` (and
Bańbura & Modugno's version as their measurement error ``kappa -> 0``) never moves them from the
starting values. Here the complete data are the factors, the idiosyncratic terms of the cells
the observations do not pin down, and the observations: at an observed monthly cell
``e_t = x_t - lambda' f_t``; in an observed quarter the first month's term follows from the
quarterly value (weight 3 in the aggregate). The change of variables has a constant Jacobian, so
this is a valid complete-data likelihood in which the loadings are identified. The M-step then
updates ``lambda`` given ``rho`` (least squares on quasi-differences) and ``(rho, sigma^2)`` given
``lambda``, each a conditional maximisation (ECM; Meng & Rubin 1993). ``update_loadings=False``
gives statsmodels' step, which the tests bind to statsmodels to 1e-10.

**Acceleration.** SQUAREM (Varadhan & Roland 2008) extrapolates two EM steps, with a
monotonicity safeguard; see :func:`em_fit`.

Convergence: ``2 |l_k - l_{k-1}| / (|l_k| + |l_{k-1}|) < tol`` (Bańbura & Modugno 2014; the
criterion of statsmodels), at most ``max_iter`` E-steps; an iterate that lowers the
log-likelihood by more than 1e-4 is rejected and ends the loop (as statsmodels' default).

Safeguards the published algorithm does not have: idiosyncratic AR coefficients are clipped to
``|rho| <= 0.999`` and variances floored at 1e-6 (a variance of zero would make the state
singular), and a factor VAR estimate with a companion spectral radius above 0.999 is shrunk
radially (``A_l <- c^l A_l``) to radius 0.999 so that the stationary initial state exists.
Monthly series with a gap longer than one month enter the loading step through the latent
terms of the gap (exact); nothing is approximated there.

References
----------
Bańbura, M. and Modugno, M. (2014). Maximum likelihood estimation of factor models on datasets
with arbitrary pattern of missing data. *Journal of Applied Econometrics* 29(1), 133-160.
Bańbura, M., Giannone, D. and Reichlin, L. (2011). Nowcasting. In Clements, M. P. and Hendry,
D. F. (eds), *The Oxford Handbook of Economic Forecasting*, Oxford University Press, 193-224.
Dempster, A. P., Laird, N. M. and Rubin, D. B. (1977). Maximum likelihood from incomplete data
via the EM algorithm. *Journal of the Royal Statistical Society B* 39(1), 1-38.
Meng, X.-L. and Rubin, D. B. (1993). Maximum likelihood estimation via the ECM algorithm: a
general framework. *Biometrika* 80(2), 267-278.
Varadhan, R. and Roland, C. (2008). Simple and globally convergent methods for accelerating
the convergence of any EM algorithm. *Scandinavian Journal of Statistics* 35(2), 335-353.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from harness.models.dfm_fast import FilterOutput, SmoothedMoments, filter_fast, smooth_fast
from harness.models.dfm_ssm import (
    MM_WEIGHTS,
    DFMParams,
    StateLayout,
    kalman_reference,
    spectral_radius,
    system,
)

__all__ = ["EMResult", "em_fit", "estep", "mstep", "start_params"]

_RHO_MAX = 0.999
_VAR_MIN = 1e-6
_RADIUS_MAX = 0.999
_DECREASE_TOL = 1e-4


def estep(x: np.ndarray, params: DFMParams, layout: StateLayout, tol: float = 1e-11, *,
          reference: bool = False) -> tuple[float, SmoothedMoments, FilterOutput | None]:
    """Log-likelihood and smoothed moments at ``params``.

    ``reference=True`` uses the dense NumPy filter and smoother of
    :func:`harness.models.dfm_ssm.kalman_reference` and extracts the same moments.
    """
    ss = system(params, layout)
    if reference:
        ref = kalman_reference(x, ss)
        b, e = layout.block_states, layout.idio_states
        f = np.arange(layout.n_factors)
        f2 = np.arange(2 * layout.n_factors)
        mom = SmoothedMoments(ref.mean, ref.cov[:, b][:, :, b], ref.cov[:, e][:, :, f2],
                              ref.cov[:, e, e], ref.autocov[:, e, e],
                              np.swapaxes(ref.autocov[:, f][:, :, e], 1, 2))
        return ref.llf, mom, None
    fo = filter_fast(x, ss, tol)
    return fo.llf, smooth_fast(fo, ss, tol), fo


def _solve_right(b: np.ndarray, a: np.ndarray) -> np.ndarray:
    """``b a^{-1}`` for a symmetric positive (semi-)definite ``a`` (least squares if singular)."""
    try:
        return np.linalg.solve(a, b.T).T
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(a, b.T, rcond=None)[0].T


def mstep(x: np.ndarray, mom: SmoothedMoments, params: DFMParams, layout: StateLayout, *,
          update_loadings: bool = True) -> DFMParams:
    """New parameters raising the expected complete-data log-likelihood (see module docstring).

    Parameters
    ----------
    x : ndarray (T, n)
        Standardised observations (NaN where missing).
    mom : SmoothedMoments
        From :func:`estep` at ``params``.
    params : DFMParams
        The current parameters (the white-noise monthly variances use them for missing cells,
        Bańbura & Modugno 2014, eq. 12; the conditional steps start from the current ``rho``).
    layout : StateLayout
    update_loadings : bool, default True
        False gives the M-step of statsmodels' ``DynamicFactorMQ`` (and of Bańbura & Modugno
        2014 as their measurement error ``kappa -> 0``) for series whose idiosyncratic term is in
        the state: their loadings stay at the current values. Used by the tests that bind this
        implementation to statsmodels.
    """
    nt, n = x.shape
    r, p = layout.n_factors, layout.factor_lags
    obs = np.isfinite(x)
    xz = np.where(obs, x, 0.0)
    b_idx = layout.block_states
    mb = mom.mean[:, b_idx]
    eb = mom.v_b + mb[:, :, None] * mb[:, None, :]  # E[b b'] per period, b = block states
    # -- factor VAR (t = 2..T)
    cur, lag = slice(0, r), slice(r, r * (p + 1))
    s1 = eb[1:].sum(axis=0)
    coef = _solve_right(s1[cur, lag], s1[lag, lag])  # (r, r p)
    q = (s1[cur, cur] - coef @ s1[cur, lag].T) / (nt - 1)
    factor_ar = np.stack([coef[:, l_ * r:(l_ + 1) * r] for l_ in range(p)])
    rad = spectral_radius(factor_ar)
    if rad > _RADIUS_MAX:
        factor_ar = factor_ar * ((_RADIUS_MAX / rad) ** np.arange(1, p + 1))[:, None, None]
    vals, vecs = np.linalg.eigh(0.5 * (q + q.T))
    q = (vecs * np.maximum(vals, _VAR_MIN)) @ vecs.T
    # -- loadings and idiosyncratic parameters, series by series
    loadings = params.loadings.copy()
    rho = params.idio_ar.copy()
    s2 = params.idio_var.copy()
    if layout.idio_ar1 and len(layout.monthly):
        mi = layout.monthly
        loadings[mi], rho[mi], s2[mi] = _monthly_ar_steps(
            xz[:, mi], obs[:, mi], mom, eb, r, layout.monthly_idio_state[mi], params.loadings[mi],
            params.idio_ar[mi], update_loadings)
    for i in range(n):
        if layout.quarterly[i]:
            loadings[i], rho[i], s2[i] = _quarterly_step(
                xz[:, i], obs[:, i], mb, eb, layout, i, params, update_loadings)
        elif not layout.idio_ar1:
            loadings[i], s2[i] = _monthly_wn_step(xz[:, i], obs[:, i], mom, eb, r, params, i)
    s2 = np.maximum(s2, _VAR_MIN)
    return DFMParams(loadings, factor_ar, q, rho, s2)


def _ar_update(ad: float, bd: float, cd: float, nt: int) -> tuple[float, float]:
    """``rho = B / A`` (clipped) and ``sigma^2 = (C - rho B) / (T - 1)`` from summed moments."""
    rho = float(np.clip(bd / ad, -_RHO_MAX, _RHO_MAX)) if ad > 0 else 0.0
    return rho, (cd - rho * bd) / (nt - 1)


def _monthly_wn_step(xi, o, mom, eb, r, params, i):
    """Monthly series with white-noise error: Bańbura & Modugno (2014), eq. 11-12."""
    nt = len(xi)
    mf = mom.mean[:, :r]
    eff = eb[:, :r, :r]
    lam = _solve_right((xi[o] @ mf[o])[None, :], eff[o].sum(axis=0))[0]
    fit = (xi[o] ** 2 - 2 * xi[o] * (mf[o] @ lam) + np.einsum("k,tkl,l->t", lam, eff[o], lam)).sum()
    return lam, (fit + (nt - o.sum()) * params.idio_var[i]) / nt


def _monthly_ar_steps(xm, om, mom, eb, r, es, lam, rho, update):
    """Monthly series with an AR(1) idiosyncratic term in the state, all at once.

    Complete data: the factors, the idiosyncratic terms of the *missing* cells and the
    observations; at an observed cell ``e_t = x_t - lambda' f_t`` (unit Jacobian). Conditional
    maximisation: ``lambda`` given ``rho`` (least squares on the quasi-differences
    ``e_t - rho e_{t-1}``, t = 2..T), then ``rho, sigma^2`` given ``lambda``.

    Parameters
    ----------
    xm, om : ndarray (T, k)
        The monthly series (zero where missing) and their observed flags, in the order of
        ``layout.idio_states``.
    lam, rho : ndarray (k, r), (k,)
        Current loadings and AR coefficients.
    """
    nt = xm.shape[0]
    mf, mf1 = mom.mean[:, :r], mom.mean[:, r:2 * r]
    eff, ef1f1, eff1 = eb[:, :r, :r], eb[:, r:2 * r, r:2 * r], eb[:, :r, r:2 * r]
    me = mom.mean[:, es]
    ee = mom.v_ee + me * me  # E[eps_t^2] of the latent term
    eef1 = mom.v_ef[:, :, r:2 * r] + me[:, :, None] * mf1[:, None, :]  # E[eps_t f_{t-1}]
    ee1 = mom.c_ee[1:] + me[1:] * me[:-1]  # E[eps_t eps_{t-1}], t >= 1
    efe1 = mom.c_fe[1:] + mf[1:, None, :] * me[:-1, :, None]  # E[f_t eps_{t-1}], t >= 1
    o = om.astype(float)
    oc, op = o[1:], o[:-1]
    xc, xp = xm[1:], xm[:-1]
    nm = xm.shape[1]
    rr = r * r

    def tsum(w, m3):  # sum_t w[t, i] m3[t] for every series i, as one matrix product
        return (w.T @ m3.reshape(len(m3), -1)).reshape(nm, *m3.shape[1:])

    if update:
        sym = eff1[1:] + np.swapaxes(eff1[1:], 1, 2)
        a = (tsum(oc, eff[1:]) + (rho * rho)[:, None, None] * tsum(op, ef1f1[1:])
             - rho[:, None, None] * tsum(oc * op, sym))
        b = (tsum(oc * xc, mf[1:])
             - rho[:, None] * (tsum(oc * op * xp, mf[1:])
                               + ((oc * (1 - op))[:, :, None] * efe1).sum(axis=0))
             - rho[:, None] * (tsum(op * oc * xc, mf1[1:])
                               + ((op * (1 - oc))[:, :, None] * eef1[1:]).sum(axis=0))
             + (rho * rho)[:, None] * tsum(op * xp, mf1[1:]))
        try:
            lam = np.linalg.solve(a, b[:, :, None])[:, :, 0]
        except np.linalg.LinAlgError:
            lam = np.stack([_solve_right(b[i][None, :], a[i])[0] for i in range(len(b))])
    fl = mf @ lam.T  # (T, k): lambda' f_t
    fl1 = mf1 @ lam.T
    ll = (lam[:, :, None] * lam[:, None, :]).reshape(nm, rr)
    quad = eff.reshape(nt, rr) @ ll.T  # lambda' E[f_t f_t'] lambda
    quad1 = eff1[1:].reshape(nt - 1, rr) @ ll.T
    e2 = o * (xm * xm - 2 * xm * fl + quad) + (1 - o) * ee
    e11 = (oc * op * (xc * xp - xc * fl1[1:] - xp * fl[1:] + quad1)
           + oc * (1 - op) * (xc * me[:-1] - (efe1 * lam).sum(axis=2))
           + (1 - oc) * op * (xp * me[1:] - (eef1[1:] * lam).sum(axis=2))
           + (1 - oc) * (1 - op) * ee1)
    ad, bd, cd = e2[:-1].sum(axis=0), e11.sum(axis=0), e2[1:].sum(axis=0)
    rho_new = np.clip(np.divide(bd, ad, out=np.zeros_like(bd), where=ad > 0), -_RHO_MAX, _RHO_MAX)
    return lam, rho_new, (cd - rho_new * bd) / (nt - 1)


def _quarterly_step(xi, o, mb, eb, layout, i, params, update):
    """Quarterly series: loading on the aggregate factor, AR(1) or white-noise monthly term.

    Complete data: the factors, the monthly idiosyncratic terms except, in each observed
    quarter, that of its first month (weight 3 in the aggregate), which the observation pins
    down: ``e_d = (x_t - lambda' g_t - sum_{k != 2} w_k e_{t-k}) / 3`` (constant Jacobian).
    Only the two transition terms around ``e_d`` involve ``lambda``, and all they need lies in
    ``alpha_t``; ``lambda`` given ``rho`` is least squares, then ``rho, sigma^2`` given ``lambda``.
    """
    nt = len(xi)
    r = layout.n_factors
    pos = {int(s_): k for k, s_ in enumerate(layout.block_states)}
    q0 = int(layout.quarterly_idio_state[i])
    p_ = [pos[q0 + k] for k in range(5)]
    nb = len(layout.block_states)
    g = np.zeros((r, nb))  # g_t = G alpha_t (the aggregate of the factors)
    for k, w in enumerate(MM_WEIGHTS):
        for f_ in range(r):
            g[f_, pos[k * r + f_]] = w
    sv = np.zeros(nb)  # sum_{k != 2} w_k e_{t-k}
    for k, w in enumerate(MM_WEIGHTS):
        if k != 2:
            sv[p_[k]] = w
    ar1 = layout.idio_ar1
    lo = 1 if ar1 else 0  # AR: transition terms t = 2..T; white noise: every period
    ts = np.flatnonzero(o)
    lam = params.loadings[i]
    rh = params.idio_ar[i] if ar1 else 0.0
    if update and len(ts):
        d = ts - 2
        k1 = ((d >= lo) & (d <= nt - 1)).astype(float)
        k2 = ((d + 1 >= lo) & (d + 1 <= nt - 1)).astype(float) if ar1 else np.zeros(len(ts))
        wgt = k1 + k2 * rh * rh
        M, mu = eb[ts], mb[ts]
        gm = np.einsum("kb,tbc->tkc", g, M)  # G M, (n_obs, r, nb)
        a = np.einsum("t,tkc,lc->kl", wgt, gm, g)
        b = (wgt[:, None] * (xi[ts, None] * (mu @ g.T) - gm @ sv)
             - 3 * rh * (k1[:, None] * gm[:, :, p_[3]] + k2[:, None] * gm[:, :, p_[1]])).sum(axis=0)
        if np.any(wgt > 0):
            lam = _solve_right(b[None, :], a)[0]
    # baseline sums from the states, then the pinned-down months at the new lambda
    e2 = eb[:, p_[0], p_[0]]  # E[e_t^2] read at alpha_t
    if ar1:
        ad, bd, cd = eb[1:, p_[1], p_[1]].sum(), eb[1:, p_[0], p_[1]].sum(), e2[1:].sum()
    else:
        cd = e2.sum()
    ell = sv + g.T @ lam
    if len(ts):
        dd = ts - 2
        M, mu, xq = eb[ts], mb[ts], xi[ts]
        ml = M @ ell  # (n_obs, nb)
        dif2 = (xq * xq - 2 * xq * (mu @ ell) + ml @ ell) / 9.0 - M[:, p_[2], p_[2]]
        if ar1:
            k1 = (dd >= 1) & (dd <= nt - 1)
            k2 = (dd + 1 >= 1) & (dd + 1 <= nt - 1)
            da = (xq * mu[:, p_[3]] - ml[:, p_[3]]) / 3.0 - M[:, p_[2], p_[3]]
            db = (xq * mu[:, p_[1]] - ml[:, p_[1]]) / 3.0 - M[:, p_[1], p_[2]]
            cd += dif2[k1].sum()
            bd += da[k1].sum() + db[k2].sum()
            ad += dif2[k2].sum()
        else:
            cd += dif2[(dd >= 0) & (dd <= nt - 1)].sum()
    if not ar1:
        return lam, 0.0, cd / nt
    rh, s = _ar_update(ad, bd, cd, nt)
    return lam, rh, s


def start_params(x: np.ndarray, layout: StateLayout) -> DFMParams:
    """Starting values: principal components of the monthly block, then OLS.

    Missing cells are set to the (zero) mean of the standardised data before the principal
    components; loadings are OLS on each series' observed periods (quarterly series on the
    aggregate of the factors); the factor VAR is OLS (white noise if the OLS estimate is not
    stable); idiosyncratic AR(1) coefficients are OLS on pairs of consecutive residuals, clipped
    to ``[-0.99, 0.99]``; a quarterly idiosyncratic term starts as white noise with the residual
    variance divided by ``sum_k w_k^2 = 19``. The recipe follows statsmodels' ``start_params``
    in spirit (common practice), not in detail.
    """
    nt, n = x.shape
    r, p = layout.n_factors, layout.factor_lags
    obs = np.isfinite(x)
    mon = layout.monthly
    xm = np.where(obs[:, mon], x[:, mon], 0.0)
    u, s, _ = np.linalg.svd(xm, full_matrices=False)
    f = u[:, :r] * s[:r] / np.sqrt(len(mon))
    agg = np.zeros_like(f)
    for k, w in enumerate(MM_WEIGHTS):
        agg[k:] += w * f[: nt - k]
    loadings = np.zeros((n, r))
    rho = np.zeros(n)
    s2 = np.ones(n)
    for i in range(n):
        o = obs[:, i].copy()
        reg = agg if layout.quarterly[i] else f
        if layout.quarterly[i]:
            o[:4] = False
        lam = np.linalg.lstsq(reg[o], x[o, i], rcond=None)[0]
        loadings[i] = lam
        resid = np.full(nt, np.nan)
        resid[o] = x[o, i] - reg[o] @ lam
        v = float(np.nanvar(resid)) if o.sum() > 1 else 1.0
        if layout.quarterly[i]:
            s2[i] = max(v / float(MM_WEIGHTS @ MM_WEIGHTS), 1e-4)
        else:
            pair = np.isfinite(resid[1:]) & np.isfinite(resid[:-1])
            if layout.idio_ar1 and pair.sum() > 2:
                e1, e0 = resid[1:][pair], resid[:-1][pair]
                rho[i] = float(np.clip(e0 @ e1 / (e0 @ e0), -0.99, 0.99))
                s2[i] = max(float(np.var(e1 - rho[i] * e0)), 1e-4)
            else:
                s2[i] = max(v, 1e-4)
    y = f[p:]
    xl = np.concatenate([f[p - l_:nt - l_] for l_ in range(1, p + 1)], axis=1)
    coef = np.linalg.lstsq(xl, y, rcond=None)[0].T  # (r, r p)
    factor_ar = np.stack([coef[:, l_ * r:(l_ + 1) * r] for l_ in range(p)])
    resid = y - xl @ coef.T
    q = resid.T @ resid / len(y)
    if spectral_radius(factor_ar) >= 0.99:
        factor_ar = np.zeros_like(factor_ar)
        q = np.cov(f.T).reshape(r, r)
    q = 0.5 * (q + q.T) + 1e-8 * np.eye(r)
    return DFMParams(loadings, factor_ar, q, rho, s2)


@dataclass
class EMResult:
    """The estimate and the run of the EM algorithm."""

    params: DFMParams
    llf: float
    n_iter: int  # E-steps run
    converged: bool
    llf_path: np.ndarray  # log-likelihood of each accepted iterate
    filter: FilterOutput | None  # the filter at ``params`` (fast path only)


def _unflat(v: np.ndarray, like: DFMParams) -> DFMParams:
    parts, k = [], 0
    for a in (like.loadings, like.factor_ar, like.factor_cov, like.idio_ar, like.idio_var):
        parts.append(v[k:k + a.size].reshape(a.shape))
        k += a.size
    q = parts[2]
    return DFMParams(parts[0], parts[1], 0.5 * (q + q.T), parts[3], parts[4])


def _valid(p: DFMParams) -> bool:
    """Whether an extrapolated parameter vector is admissible (stable, positive variances)."""
    if not (np.all(np.isfinite(p.flat())) and np.all(p.idio_var >= _VAR_MIN)
            and np.all(np.abs(p.idio_ar) <= _RHO_MAX)):
        return False
    if np.linalg.eigvalsh(p.factor_cov).min() < _VAR_MIN:
        return False
    return spectral_radius(p.factor_ar) <= _RADIUS_MAX


def em_fit(x: np.ndarray, layout: StateLayout, tol: float = 1e-6, max_iter: int = 500,
           start: DFMParams | None = None, steady_tol: float = 1e-11, *,
           accelerate: bool = True, update_loadings: bool = True,
           reference: bool = False) -> EMResult:
    """Maximum-likelihood estimate by EM (see the module docstring).

    Parameters
    ----------
    x : ndarray (T, n)
        Standardised observations, NaN where missing.
    layout : StateLayout
    tol : float
        Relative log-likelihood change at which the iterations stop.
    max_iter : int
        Maximum number of E-steps.
    start : DFMParams, optional
        Starting values (default :func:`start_params`).
    steady_tol : float
        Tolerance of the filter's periodic steady state (0: exact recursions).
    accelerate : bool, default True
        SQUAREM extrapolation (Varadhan & Roland 2008, scheme S3): two EM steps
        ``theta_1 = M(theta_0)``, ``theta_2 = M(theta_1)`` give ``r = theta_1 - theta_0``,
        ``v = theta_2 - 2 theta_1 + theta_0`` and the step length ``a = -|r|/|v|`` (at most
        -1); the extrapolate ``theta_0 - 2 a r + a^2 v`` is accepted if admissible and its
        log-likelihood is at least that of ``theta_1`` (otherwise ``a`` is halved towards -1,
        where the extrapolate is ``theta_2``), then one EM step stabilises it. Convergence is
        then tested between successive cycles. False runs plain EM.
    update_loadings : bool, default True
        See :func:`mstep` (False reproduces statsmodels' M-step).
    reference : bool
        Use the dense NumPy E-step (slow; for tests).

    Returns
    -------
    EMResult
        ``params`` is the last parameter vector whose log-likelihood was evaluated, so ``llf``
        and ``filter`` belong to it.

    References
    ----------
    Varadhan, R. and Roland, C. (2008). Simple and globally convergent methods for accelerating
    the convergence of any EM algorithm. *Scandinavian Journal of Statistics* 35(2), 335-353.
    """
    params = start_params(x, layout) if start is None else start
    n_e = 0

    def e(p):
        nonlocal n_e
        n_e += 1
        out = estep(x, p, layout, steady_tol, reference=reference)
        if not np.isfinite(out[0]):
            raise FloatingPointError(f"EM: the log-likelihood is not finite after {n_e} E-steps")
        return out

    def m(p, mom):
        return mstep(x, mom, p, layout, update_loadings=update_loadings)

    llf, mom, fo = e(params)
    path = [llf]
    converged = False
    while n_e < max_iter:
        p1 = m(params, mom)
        l1, mom1, fo1 = e(p1)
        if not accelerate or n_e >= max_iter:
            new = (p1, l1, mom1, fo1)
        else:
            p2 = m(p1, mom1)
            t0, t1, t2 = params.flat(), p1.flat(), p2.flat()
            rr, vv = t1 - t0, t2 - 2 * t1 + t0
            nv = float(np.linalg.norm(vv))
            a = min(-float(np.linalg.norm(rr)) / nv, -1.0) if nv > 0 else -1.0
            new = None
            while new is None and n_e < max_iter:
                cand = p2 if a == -1.0 else _unflat(t0 - 2 * a * rr + a * a * vv, params)
                if a == -1.0 or _valid(cand):
                    lc, momc, foc = e(cand)
                    if a == -1.0 or lc >= l1:
                        new = (cand, lc, momc, foc)
                        break
                a = -1.0 if a > -1.5 else (a - 1.0) / 2.0
            if new is None:
                new = (p1, l1, mom1, fo1)
            elif n_e < max_iter:
                # stabilising EM step from the accepted point
                ps = m(new[0], new[2])
                ls, moms, fos = e(ps)
                if ls >= new[1] - _DECREASE_TOL:
                    new = (ps, ls, moms, fos)
        if new[1] - llf < -_DECREASE_TOL:
            converged = True  # a decrease: keep the previous iterate (statsmodels' 'revert')
            break
        delta = 2 * abs(new[1] - llf) / (abs(new[1]) + abs(llf))
        params, llf, mom, fo = new
        path.append(llf)
        if delta < tol:
            converged = True
            break
    return EMResult(params, float(llf), n_e, converged, np.array(path), fo)
