"""The stochastic-volatility Gibbs sampler block by block in NumPy/SciPy: the reference the compiled
sampler (:mod:`harness.models.sv_kernels`) is tested against, and the fallback without numba."""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
from scipy.linalg import lapack

from harness.models.sv_kernels import _fast_kernels, _indicators_reference, _tridiag_draw_reference
from harness.models.sv_tables import (
    _ACCEPT_TARGET,
    _H1_PRIOR_VAR,
    _LOGSQ_OFFSET,
    _MIX_MEANS,
    KSC_VARIANCES,
)


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
    diag, off = _volatility_precision(mix_vars, phi, h1_var)  # off[:, -1] = 0: no coupling
    rhs = (ystar - mix_means).T * prec_obs
    rhs[:, 0] += h1_mean / h1_var
    z = rng.standard_normal(n * t)
    draw = _tridiag_draw_reference if reference else _fast_kernels()["tridiag"]
    h = draw(diag.ravel(), off.ravel()[:-1].copy(), rhs.ravel(), z)
    return h.reshape(n, t).T


def _volatility_precision(mix_vars: np.ndarray, phi: np.ndarray, h1_var: float) -> tuple[np.ndarray, np.ndarray]:
    """Diagonal and first sub-diagonal ``(n, T)`` of the posterior precision of the paths given the indicators."""
    t, n = mix_vars.shape
    inv_phi = 1.0 / phi
    diag = np.empty((n, t))
    diag[:] = 2.0 * inv_phi[:, None]
    diag[:, -1] = inv_phi
    diag[:, 0] = inv_phi + 1.0 / h1_var if t > 1 else 1.0 / h1_var
    diag += 1.0 / mix_vars.T
    off = np.empty((n, t))
    off[:, :-1] = -inv_phi[:, None]
    off[:, -1] = 0.0
    return diag, off


def log_vol_marginal(ystar: np.ndarray, mix_means: np.ndarray, mix_vars: np.ndarray,
                     phi: np.ndarray, h1_mean: np.ndarray, h1_var: float) -> np.ndarray:
    """Log density of ``ystar`` given the indicators and ``phi`` with the log-volatility paths integrated out.

    ``r = ystar - mix_means = h + N(0, D)``, ``D = diag(mix_vars)``, and ``h`` is a random walk
    with ``h_1 ~ N(h1_mean, h1_var)``: prior precision ``K0 = H'H / phi + e_1 e_1' / h1_var``
    (``|K0| = 1 / (h1_var phi^(T-1))``), posterior precision ``K = K0 + D^{-1} = L L'`` and
    ``b = D^{-1} r + e_1 h1_mean / h1_var``, so that

    ``log p(r) = -T/2 log 2 pi - 1/2 log|D| + 1/2 log|K0| - 1/2 log|K|
    - 1/2 (r'D^{-1}r + h1_mean^2 / h1_var - b'K^{-1}b)``,

    with ``log|K|`` and ``b'K^{-1}b = |L^{-1}b|^2`` from the same banded Cholesky factor that the
    precision sampler uses (Chan & Jeliazkov 2009; Chan & Grant 2016). Obviously-correct
    reference (SciPy's banded routines) of the compiled ``_vol_loglik_loop``.

    Parameters
    ----------
    ystar, mix_means, mix_vars : ndarray (T, n)
    phi, h1_mean : ndarray (n,)
    h1_var : float

    Returns
    -------
    ndarray (n,)

    References
    ----------
    Chan, J. C. C. and Jeliazkov, I. (2009). *Int. J. Mathematical Modelling and Numerical
    Optimisation* 1(1/2), 101-120.
    Chan, J. C. C. and Grant, A. L. (2016). On the observed-data deviance information criterion
    for volatility modeling. *Journal of Financial Econometrics* 14(4), 772-802.
    """
    t, n = ystar.shape
    diag, off = _volatility_precision(mix_vars, phi, h1_var)
    r = (ystar - mix_means).T  # (n, T)
    prec_obs = 1.0 / mix_vars.T
    out = np.empty(n)
    for j in range(n):
        ab = np.vstack([diag[j], off[j]])
        chol = sla.cholesky_banded(ab, lower=True, check_finite=False)
        b = r[j] * prec_obs[j]
        b[0] += h1_mean[j] / h1_var
        v = sla.solve_banded((1, 0), chol, b, check_finite=False)  # L v = b
        out[j] = (-0.5 * t * np.log(2 * np.pi) + 0.5 * np.log(prec_obs[j]).sum()
                  - 0.5 * np.log(h1_var) - 0.5 * (t - 1) * np.log(phi[j]) - np.log(chol[0]).sum()
                  - 0.5 * ((r[j] * r[j] * prec_obs[j]).sum() + h1_mean[j] ** 2 / h1_var - v @ v))
    return out


def _log_phi_target(ll: np.ndarray, log_phi: np.ndarray, vol_var_df: float,
                    vol_var_scale: float) -> np.ndarray:
    """Log posterior of ``log phi`` given the indicators: marginal likelihood, scaled inverse chi-square prior, Jacobian."""
    return ll - 0.5 * vol_var_df * log_phi - 0.5 * vol_var_df * vol_var_scale * np.exp(-log_phi)


def draw_vol_var(ystar: np.ndarray, mix_means: np.ndarray, mix_vars: np.ndarray, phi: np.ndarray,
                 h1_mean: np.ndarray, h1_var: float, vol_var_df: float, vol_var_scale: float,
                 log_step: np.ndarray, z: np.ndarray, log_u: np.ndarray, gain: float,
                 accepted: np.ndarray) -> np.ndarray:
    """Metropolis-Hastings updates of ``phi`` given the indicators, the paths integrated out.

    Each of the ``len(z)`` steps proposes ``log phi_i' = log phi_i + log_step_i z_i`` (a random
    walk on the log scale) and accepts if ``log_u_i`` is below the log ratio of
    :func:`log_vol_marginal` times the scaled inverse chi-square prior (with the Jacobian of
    the log). The equations are independent given the indicators. With ``gain > 0`` (burn-in
    only) ``log log_step_i`` moves by ``gain (accepted - 0.44)`` after each step, towards the
    acceptance rate that is efficient for a one-dimensional random walk (Roberts & Rosenthal
    2001, 2009). ``log_step`` is updated in place and ``accepted`` counts acceptances.

    Parameters
    ----------
    ystar, mix_means, mix_vars : ndarray (T, n)
    phi : ndarray (n,)
        Current values (not modified).
    h1_mean : ndarray (n,)
    h1_var, vol_var_df, vol_var_scale : float
    log_step : ndarray (n,)
        Log proposal scales (updated in place when ``gain > 0``).
    z, log_u : ndarray (S, n)
        Standard normals and log uniforms of the ``S`` steps.
    gain : float
    accepted : ndarray (n,)
        Acceptance counts (incremented in place).

    Returns
    -------
    ndarray (n,)
        The new ``phi``.

    References
    ----------
    Chan & Jeliazkov (2009); Roberts, G. O. and Rosenthal, J. S. (2001). Optimal scaling for
    various Metropolis-Hastings algorithms. *Statistical Science* 16(4), 351-367; Roberts, G. O.
    and Rosenthal, J. S. (2009). Examples of adaptive MCMC. *Journal of Computational and
    Graphical Statistics* 18(2), 349-367.
    """
    log_phi = np.log(phi)
    cur = _log_phi_target(log_vol_marginal(ystar, mix_means, mix_vars, phi, h1_mean, h1_var),
                          log_phi, vol_var_df, vol_var_scale)
    for step in range(z.shape[0]):
        prop = log_phi + np.exp(log_step) * z[step]
        new = _log_phi_target(log_vol_marginal(ystar, mix_means, mix_vars, np.exp(prop), h1_mean,
                                               h1_var), prop, vol_var_df, vol_var_scale)
        acc = log_u[step] < new - cur
        log_phi = np.where(acc, prop, log_phi)
        cur = np.where(acc, new, cur)
        accepted += acc
        if gain > 0:
            log_step += gain * (acc - _ACCEPT_TARGET)
    return np.exp(log_phi)


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


def _gibbs_reference(yt: np.ndarray, x: np.ndarray, b0: np.ndarray, inv_v0: np.ndarray,
                     a_prior_var: float, vol_var_df: float, vol_var_scale: float,
                     h1_mean: np.ndarray, coefs: np.ndarray, u: np.ndarray, a: np.ndarray,
                     h: np.ndarray, phi: np.ndarray, log_step: np.ndarray, accepted: np.ndarray,
                     slot: np.ndarray, burn: int, n_steps: int, keep: tuple,
                     rng: np.random.Generator) -> None:
    """The Gibbs iterations block by block with NumPy/SciPy (the obviously-correct reference).

    The state ``coefs, u, a, h, phi, log_step`` is updated in place; ``accepted`` counts the
    accepted ``phi`` proposals of the iterations from ``burn`` on.
    """
    t, n = yt.shape
    k = x.shape[1]
    keep_coefs, keep_a, keep_h, keep_phi = keep
    scratch = np.zeros(n)
    for it in range(slot.shape[0]):
        inv_lam = np.exp(-h)  # (T, n)
        # 1. coefficients, equation by equation (corrected triangular algorithm)
        draw_coefficients(yt, x, coefs, u, a, inv_lam, b0, inv_v0, rng.standard_normal((n, k)))
        # 2. free elements of A, row by row
        draw_impacts(u, a, inv_lam, a_prior_var, rng)
        e = u @ a.T
        # 3. mixture indicators (Del Negro & Primiceri order: after B and A, before h)
        ystar = np.log(e * e + _LOGSQ_OFFSET)
        comp = _indicators_reference(ystar - h, rng.random((t, n)))
        mm, vv = _MIX_MEANS[comp], KSC_VARIANCES[comp]
        # 4.-5. (phi, h) jointly given the indicators: phi from its marginal with h integrated
        # out (Metropolis-Hastings), then h given phi (precision sampler)
        z = rng.standard_normal((n_steps, n))
        log_u = np.log(rng.random((n_steps, n)))
        gain = (it + 1.0) ** -0.6 if it < burn else 0.0
        phi[:] = draw_vol_var(ystar, mm, vv, phi, h1_mean, _H1_PRIOR_VAR, vol_var_df, vol_var_scale,
                              log_step, z, log_u, gain, accepted if it >= burn else scratch)
        h = sample_log_volatility(ystar, mm, vv, phi, h1_mean, _H1_PRIOR_VAR, rng, reference=True)
        if slot[it] >= 0:
            kept = slot[it]
            keep_coefs[kept], keep_a[kept], keep_h[kept], keep_phi[kept] = coefs, a, h, phi
