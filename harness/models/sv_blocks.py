"""The stochastic-volatility Gibbs sampler block by block in NumPy/SciPy: the reference the compiled
sampler (:mod:`harness.models.sv_kernels`) is tested against, and the fallback without numba."""

from __future__ import annotations

import numpy as np
from scipy.linalg import lapack

from harness.models.sv_kernels import _fast_kernels, _indicators_reference, _tridiag_draw_reference
from harness.models.sv_tables import (
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
