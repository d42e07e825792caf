"""VAR predictive paths, conditioned on the observed part of a ragged edge.

At an origin some variables have been published for periods after the balanced sample ends (the
ragged edge). A VAR estimated on the balanced sample forecasts the joint path from the balanced
end; the values already observed in the tail are *conditions* on that path. Given the parameters,
the path over the first ``R`` steps is a linear function of the innovations,

.. math:: y_{T+j} = m_j + \\sum_{i=1}^{j} \\Psi_{j-i} F_i z_i, \\qquad z_i \\sim N(0, I_n),

so the observed cells are linear restrictions :math:`G z = r` on the stacked innovations
(Waggoner & Zha 1999). Draws from :math:`z \\mid G z = r` are obtained from unconditional draws by
the exact Gaussian update :math:`z^c = z + G'(GG')^{-1}(r - G z)`, after which the VAR recursion
continues from the conditioned path. Everything is vectorised over parameter draws; the only
Python loops are over forecast steps and lags.

:func:`conditional_moments` is the obviously-correct reference: the joint mean and covariance of
the whole path for one parameter draw, conditioned with the textbook formula.

References
----------
Waggoner, D. F. and Zha, T. (1999). Conditional forecasts in dynamic multivariate models.
*Review of Economics and Statistics* 81(4), 639-651.
"""

from __future__ import annotations

import numpy as np

__all__ = ["conditional_moments", "ma_matrices", "var_paths"]


def _split(coefs: np.ndarray, n: int) -> tuple[int, np.ndarray]:
    """Lag order and lag matrices ``A[d, l]`` with ``y_t = c + sum_l A_l y_{t-l}``."""
    k = coefs.shape[-2]
    p = (k - 1) // n
    if p * n + 1 != k:
        raise ValueError(f"coefficient matrices must have n*p + 1 rows (n = {n}), got {k}")
    lead = coefs.shape[:-2]
    a = coefs[..., : n * p, :].reshape(*lead, p, n, n)
    # B stores y_t' = sum_l y_{t-l}' B_l, so A_l = B_l'
    return p, np.swapaxes(a, -1, -2)


def ma_matrices(coefs: np.ndarray, steps: int) -> np.ndarray:
    """Moving-average (impulse-response) matrices of a VAR.

    Parameters
    ----------
    coefs : ndarray (..., n*p + 1, n)
        Stacked coefficients ``[B_1; ...; B_p; c']`` with ``y_t' = sum_l y_{t-l}' B_l + c' + e_t'``.
    steps : int
        Number of matrices.

    Returns
    -------
    ndarray (..., steps, n, n)
        :math:`\\Psi_0 = I`, :math:`\\Psi_j = \\sum_{l=1}^{\\min(j,p)} A_l \\Psi_{j-l}`.

    References
    ----------
    Lütkepohl, H. (2005). *New Introduction to Multiple Time Series Analysis*, Springer, sec. 2.1.
    """
    n = coefs.shape[-1]
    p, a = _split(coefs, n)
    lead = coefs.shape[:-2]
    psi = np.zeros((*lead, steps, n, n))
    psi[..., 0, :, :] = np.eye(n)
    for j in range(1, steps):
        for lag in range(1, min(j, p) + 1):
            psi[..., j, :, :] += a[..., lag - 1, :, :] @ psi[..., j - lag, :, :]
    return psi


def _step_factors(factors: np.ndarray, d: int, h: int, n: int) -> np.ndarray:
    """Shock factors as ``(D, H, n, n)`` (a view when they do not vary over steps)."""
    if factors.ndim == 3:
        return np.broadcast_to(factors[:, None], (d, h, n, n))
    if factors.shape[:2] != (d, h):
        raise ValueError(f"time-varying shock factors must have shape (D, H, n, n) = "
                         f"({d}, {h}, {n}, {n}), got {factors.shape}")
    return factors


def _deterministic_path(coefs: np.ndarray, init: np.ndarray, steps: int) -> np.ndarray:
    """Path of the VAR with all shocks set to zero, ``(D, steps, n)``."""
    zero = np.zeros((coefs.shape[0], steps, coefs.shape[-1]))
    return _recurse(coefs, init, zero, None, None)


def _recurse(coefs: np.ndarray, init: np.ndarray, shocks: np.ndarray, tail: np.ndarray | None,
             observed: np.ndarray | None) -> np.ndarray:
    """Iterate ``y_t' = x_t' B + e_t'`` for all draws at once, pinning observed tail cells."""
    d, h, n = shocks.shape
    k = coefs.shape[1]
    p = (k - 1) // n
    # (D, n, k) contiguous: the per-step product is then one fast contraction over k
    bt = np.ascontiguousarray(np.swapaxes(coefs, 1, 2))
    x = np.empty((d, k))
    x[:, -1] = 1.0
    init = np.broadcast_to(init, (d, p, n))
    for lag in range(1, p + 1):
        x[:, (lag - 1) * n: lag * n] = init[:, p - lag, :]
    out = np.empty((d, h, n))
    r = 0 if tail is None else tail.shape[0]
    for t in range(h):
        y = np.einsum("dnk,dk->dn", bt, x)
        y += shocks[:, t, :]
        if t < r:
            # conditioned cells equal the data up to rounding; pin them exactly
            y[:, observed[t]] = tail[t, observed[t]]
        out[:, t, :] = y
        if p > 1:
            x[:, n: n * p] = x[:, : n * (p - 1)].copy()
        if p:
            x[:, :n] = y
    return out


def var_paths(coefs: np.ndarray, init: np.ndarray, factors: np.ndarray, innovations: np.ndarray,
              tail: np.ndarray | None = None) -> np.ndarray:
    """Predictive paths of a VAR, one per parameter draw, conditioned on an observed tail.

    Parameters
    ----------
    coefs : ndarray (D, n*p + 1, n)
        Coefficient draws, stacked ``[B_1; ...; B_p; c']`` so that ``y_t' = x_t' B + e_t'`` with
        ``x_t = (y_{t-1}', ..., y_{t-p}', 1)'``.
    init : ndarray (p, n) or (D, p, n)
        The last ``p`` observations of the balanced sample, oldest first.
    factors : ndarray (D, n, n) or (D, H, n, n)
        Shock factors ``F`` with ``e_t = F z_t`` (any square root of the shock covariance; it may
        vary over steps, e.g. with stochastic volatility or Student-t scale mixtures).
    innovations : ndarray (D, H, n)
        Standard normal innovations ``z_t``; the conditioning is exact for Gaussian ``z``.
    tail : ndarray (R, n), optional
        Values observed after the balanced sample for steps ``1..R`` (``R <= H``), NaN where not
        observed. Observed cells are reproduced exactly in every draw.

    Returns
    -------
    ndarray (D, H, n)
        Paths for steps ``1..H`` after the balanced sample.

    Raises
    ------
    ValueError
        If shapes disagree or the tail is longer than the path.

    References
    ----------
    Waggoner, D. F. and Zha, T. (1999). Conditional forecasts in dynamic multivariate models.
    *Review of Economics and Statistics* 81(4), 639-651.
    """
    d, h, n = innovations.shape
    if coefs.shape[0] != d or coefs.shape[2] != n:
        raise ValueError(f"coefs must have shape (D, n*p+1, n) = ({d}, ., {n}), got {coefs.shape}")
    f = _step_factors(factors, d, h, n)
    observed = None
    z = innovations
    if tail is not None:
        tail = np.asarray(tail, dtype=np.float64)
        if tail.ndim != 2 or tail.shape[1] != n or tail.shape[0] > h:
            raise ValueError(f"tail must have shape (R, {n}) with R <= {h}, got {tail.shape}")
        observed = np.isfinite(tail)
        if observed.any():
            z = _condition(coefs, init, f, innovations, tail, observed)
        else:
            tail, observed = None, None
    if factors.ndim == 3:
        shocks = z @ np.swapaxes(factors, 1, 2)  # e_t' = z_t' F'
    else:
        shocks = (f @ z[..., None])[..., 0]
    return _recurse(coefs, init, shocks, tail, observed)


def _condition(coefs: np.ndarray, init: np.ndarray, f: np.ndarray, z: np.ndarray,
               tail: np.ndarray, observed: np.ndarray) -> np.ndarray:
    """Innovations conditioned on the observed tail cells (exact Gaussian update, all draws)."""
    d, h, n = z.shape
    r = tail.shape[0]
    psi = ma_matrices(coefs, r)  # (D, R, n, n)
    mean = _deterministic_path(coefs, init, r).reshape(d, r * n)
    # impact of innovation at step i on y at step j: Psi_{j-i} F_i (zero for i > j)
    g = np.zeros((d, r, n, r, n))
    for j in range(r):
        for i in range(j + 1):
            g[:, j, :, i, :] = psi[:, j - i] @ f[:, i]
    idx = np.flatnonzero(observed.ravel())
    g = g.reshape(d, r * n, r * n)[:, idx, :]  # (D, q, R n)
    zr = z[:, :r, :].reshape(d, r * n)
    resid = tail.ravel()[idx][None, :] - mean[:, idx] - np.einsum("dqk,dk->dq", g, zr)
    gram = g @ np.swapaxes(g, 1, 2)
    sol = np.linalg.solve(gram, resid[..., None])[..., 0]
    out = z.copy()
    out[:, :r, :] = (zr + np.einsum("dqk,dq->dk", g, sol)).reshape(d, r, n)
    return out


def conditional_moments(coef: np.ndarray, cov: np.ndarray, init: np.ndarray, steps: int,
                        tail: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of a VAR path given observed tail cells, for one parameter value.

    The reference implementation of :func:`var_paths`: build the joint Gaussian law of the whole
    stacked path ``(y_{T+1}', ..., y_{T+H}')'`` and condition with the textbook formula
    :math:`\\mu_{U|O} = \\mu_U + V_{UO} V_{OO}^{-1}(y_O - \\mu_O)`,
    :math:`V_{U|O} = V_{UU} - V_{UO} V_{OO}^{-1} V_{OU}`.

    Parameters
    ----------
    coef : ndarray (n*p + 1, n)
    cov : ndarray (n, n) or (H, n, n)
        Shock covariance (per step if time-varying).
    init : ndarray (p, n)
    steps : int
        Path length ``H``.
    tail : ndarray (R, n), optional
        Observed values (NaN where free), ``R <= H``.

    Returns
    -------
    mean : ndarray (H, n)
    covariance : ndarray (H*n, H*n)
        Of the stacked path; rows and columns of observed cells are zero.

    References
    ----------
    Waggoner, D. F. and Zha, T. (1999), *Review of Economics and Statistics* 81(4), 639-651;
    Anderson, T. W. (2003). *An Introduction to Multivariate Statistical Analysis*, 3rd ed.,
    Wiley, sec. 2.5 (conditional normal distributions).
    """
    n = coef.shape[1]
    covs = np.broadcast_to(cov, (steps, n, n)) if np.ndim(cov) == 2 else np.asarray(cov)
    psi = ma_matrices(coef, steps)
    mu = _deterministic_path(coef[None], np.asarray(init)[None], steps)[0].ravel()
    m = np.zeros((steps * n, steps * n))
    for j in range(steps):
        for i in range(j + 1):
            m[j * n:(j + 1) * n, i * n:(i + 1) * n] = psi[j - i]
    s = np.zeros((steps * n, steps * n))
    for i in range(steps):
        s[i * n:(i + 1) * n, i * n:(i + 1) * n] = covs[i]
    v = m @ s @ m.T
    if tail is None or not np.isfinite(tail).any():
        return mu.reshape(steps, n), v
    obs = np.zeros(steps * n, dtype=bool)
    obs[: tail.size] = np.isfinite(np.asarray(tail)).ravel()
    y_o = np.asarray(tail).ravel()[obs[: tail.size]]
    u = ~obs
    k = v[np.ix_(u, obs)] @ np.linalg.inv(v[np.ix_(obs, obs)])
    mean = mu.copy()
    mean[u] = mu[u] + k @ (y_o - mu[obs])
    mean[obs] = y_o
    cond = np.zeros_like(v)
    cond[np.ix_(u, u)] = v[np.ix_(u, u)] - k @ v[np.ix_(obs, u)]
    return mean.reshape(steps, n), cond
