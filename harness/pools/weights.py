"""Pool weights from scored forecasts, vectorised over cells (one cell = origin x variable x horizon).

Inputs are gathered windows: ``values`` of shape ``(C, M, W)`` (member ``m``'s score or density
at each of the ``W`` forecasts of cell ``c``'s window) and ``mask`` of shape ``(C, W)`` (which
window slots hold a forecast). Every reduction runs along the last axis, so a cell's weights are
the same floating-point numbers whatever the other cells are.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from harness.pools.errors import PoolError

__all__ = ["OptimalFit", "equal_weights", "inverse_score_weights", "mean_log_pool",
           "optimal_weights"]


def equal_weights(available: np.ndarray) -> np.ndarray:
    """``1 / (number available)`` for each available member; NaN where none is available.

    Parameters
    ----------
    available : ndarray of bool, shape (..., M)

    Returns
    -------
    ndarray of float64, shape (..., M)
    """
    a = available.astype(np.float64)
    n = a.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, a / n, np.nan)


def inverse_score_weights(scores: np.ndarray, mask: np.ndarray, *, score: str = "score"
                          ) -> np.ndarray:
    """Weights proportional to the inverse of each member's mean score over the window.

    ``w_m = (1 / s_m) / sum_j (1 / s_j)`` with ``s_m`` the mean of member ``m``'s scores over the
    window. A member with mean score exactly 0 (e.g. every forecast an already published value)
    takes the limit of that rule: the members with zero mean share the weight equally.

    Parameters
    ----------
    scores : ndarray, shape (C, M, W)
        Positive loss scores (lower is better), finite where ``mask``.
    mask : ndarray of bool, shape (C, W)
        At least one True per cell.
    score : str
        Name used in error messages.

    Returns
    -------
    ndarray of float64, shape (C, M)

    Raises
    ------
    PoolError
        If a member's mean score is negative (the rule needs a positive loss such as the CRPS).

    References
    ----------
    Bates, J. M. and Granger, C. W. J. (1969). The combination of forecasts. *Operational
    Research Quarterly* 20(4), 451-468 (weights inversely proportional to past squared errors;
    the CRPS version is common practice).
    """
    n = mask.sum(axis=1).astype(np.float64)
    mean = np.where(mask[:, None, :], scores, 0.0).sum(axis=2) / n[:, None]
    if (mean < 0).any():
        c, m = np.argwhere(mean < 0)[0]
        raise PoolError(f"inverse-score weights need a non-negative loss; score {score!r} has "
                        f"mean {mean[c, m]:.6g} for member {m} in a window (use e.g. 'crps')")
    zero = mean == 0
    with np.errstate(divide="ignore"):
        inv = np.where(zero.any(axis=1, keepdims=True), zero.astype(np.float64), 1.0 / mean)
    return inv / inv.sum(axis=1, keepdims=True)


def mean_log_pool(density: np.ndarray, mask: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The average log score of the linear pool, ``(1/n) sum_t log sum_m w_m f_mt``, per cell.

    Parameters
    ----------
    density : ndarray, shape (C, M, W)
        Positive member densities at the truths (any positive value where not ``mask``).
    mask : ndarray of bool, shape (C, W)
    weights : ndarray, shape (C, M)

    Returns
    -------
    ndarray of float64, shape (C,)
    """
    p = _pool_density(weights, density)
    return np.where(mask, np.log(p), 0.0).sum(axis=1) / mask.sum(axis=1)


def _pool_density(w: np.ndarray, f: np.ndarray) -> np.ndarray:
    """``sum_m w_m f_m`` as explicit element-wise terms (no reduction whose order could vary)."""
    p = w[:, 0, None] * f[:, 0]
    for m in range(1, f.shape[1]):
        p = p + w[:, m, None] * f[:, m]
    return p


def _objective(w: np.ndarray, f: np.ndarray, inv_n: np.ndarray) -> np.ndarray:
    # slots outside the window hold f = 1, so p = sum(w) = 1 there and log p adds nothing
    return (inv_n * np.log(_pool_density(w, f))).sum(axis=1)


def _normalise(w: np.ndarray) -> np.ndarray:
    return w / w.sum(axis=1, keepdims=True)


def _newton_direction(w: np.ndarray, g: np.ndarray, f: np.ndarray, inv_n_p2: np.ndarray
                      ) -> np.ndarray:
    """Newton direction of L within the support ``w_m > 0`` (sum 0, zero off the support).

    Solves ``N_SS d_S + mu 1 = g_S``, ``1' d_S = 0`` where ``N = (1/n) sum_t f_t f_t' / p_t^2``
    is minus the Hessian of ``L``: the maximiser of the quadratic model of ``L`` on the face.
    """
    c, m = w.shape
    negh = np.empty((c, m, m))
    for i in range(m):
        for j in range(i, m):
            negh[:, i, j] = negh[:, j, i] = (f[:, i] * f[:, j] * inv_n_p2).sum(axis=1)
    free = w > 0
    ridge = 1e-12 * np.trace(negh, axis1=1, axis2=2) / m
    k = np.zeros((c, m + 1, m + 1))
    k[:, :m, :m] = np.where(free[:, :, None] & free[:, None, :], negh, 0.0)
    idx = np.arange(m)
    k[:, idx, idx] += np.where(free, ridge[:, None], 1.0)  # d_m = 0 off the support
    k[:, :m, m] = k[:, m, :m] = free
    rhs = np.zeros((c, m + 1))
    rhs[:, :m] = np.where(free, g, 0.0)
    return np.linalg.solve(k, rhs[..., None])[:, :m, 0]


def _newton_step(w, f, inv_n, cur):
    """Newton step on the support of ``w``, cut where a weight reaches 0 (that member leaves).

    Halved until ``L`` is at least ``cur`` (up to rounding); returns the start point (and its
    ``L``) when no step is.
    """
    p = _pool_density(w, f)
    ip = inv_n / p
    g = (f * ip[:, None, :]).sum(axis=2)
    d = _newton_direction(w, g, f, ip * ip / np.where(inv_n > 0, inv_n, 1.0))
    shrink = (w > 0) & (d < 0)
    with np.errstate(divide="ignore"):
        ratio = np.where(shrink, w / np.where(shrink, -d, 1.0), np.inf)
    t_max = ratio.min(axis=1)
    blocker = ratio.argmin(axis=1)
    t = np.minimum(1.0, t_max)
    w_new = w.copy()
    obj = (inv_n * np.log(p)).sum(axis=1)
    todo = np.arange(w.shape[0])
    for _ in range(30):
        cand = w[todo] + t[todo, None] * d[todo]
        hit = t[todo] >= t_max[todo]
        cand[hit, blocker[todo][hit]] = 0.0  # the member that reached the boundary leaves
        cand = _normalise(np.maximum(cand, 0.0))
        o = _objective(cand, f[todo], inv_n[todo])
        # within rounding: at the optimum L changes below its last bits while Newton still
        # shrinks the gap
        ok = o >= cur[todo] - 64 * np.finfo(float).eps * (1.0 + np.abs(cur[todo]))
        w_new[todo[ok]], obj[todo[ok]] = cand[ok], o[ok]
        todo = todo[~ok]
        if todo.size == 0:
            break
        t[todo] *= 0.5
    return w_new, obj


def _frank_wolfe_step(w, g, f, inv_n, p):
    """Line search from ``w`` towards the vertex of largest gradient (re-admits a member)."""
    c, m = w.shape
    best = g.argmax(axis=1)
    rows = np.arange(c)
    fv = f[rows, best]  # (C, W): density of the best member
    diff = fv - p
    eta = np.zeros(c)
    # phi(eta) = L((1 - eta) w + eta e) is concave with phi'(0) = gap > 0: safeguarded 1-D Newton
    for _ in range(8):
        q = p + eta[:, None] * diff
        d1 = (inv_n * diff / q).sum(axis=1)
        d2 = (inv_n * (diff / q) ** 2).sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(d2 > 0, d1 / d2, 0.0)
        eta = np.clip(eta + step, 0.0, 1.0)
    w_new = (1.0 - eta)[:, None] * w
    w_new[rows, best] += eta
    w_new = _normalise(w_new)
    return w_new, _objective(w_new, f, inv_n)


@dataclass(frozen=True)
class OptimalFit:
    """Result of :func:`optimal_weights`.

    Attributes
    ----------
    weights : ndarray, shape (C, M)
    gap : ndarray, shape (C,)
        Certified bound on the objective's distance to its maximum, ``max_m g_m - 1``.
    objective : ndarray, shape (C,)
        The average log score of the pool at ``weights``.
    n_iter : ndarray of int, shape (C,)
        Iterations used by each cell.
    converged : ndarray of bool, shape (C,)
    """

    weights: np.ndarray
    gap: np.ndarray
    objective: np.ndarray
    n_iter: np.ndarray
    converged: np.ndarray


def optimal_weights(density: np.ndarray, mask: np.ndarray, *, tol: float = 1e-10,
                    max_iter: int = 100) -> OptimalFit:
    """Weights on the simplex maximising the average log score of the linear pool.

    Maximises the concave ``L(w) = (1/n) sum_t log sum_m w_m f_mt`` over
    ``{w >= 0, sum w = 1}`` for each cell, from equal weights. Each iteration takes the best
    of three ascent steps, an active-set scheme:

    * a Newton step within the current support (members with weight): the maximiser of the
      quadratic model of ``L`` on that face, cut where a weight reaches 0 (the member
      leaves the support) and halved until ``L`` does not fall; and the same from the current
      weights with the members of gradient ``g_m < 1`` set to 0 (the face the KKT
      conditions point to, where Newton converges fast);
    * a Frank-Wolfe step towards the vertex of the largest gradient ``g_m``, with a 1-D
      Newton line search: the only step that can give weight back to a member at 0;
    * the EM fixed-point step ``w_m <- w_m g_m``, ``g_m = dL/dw_m = (1/n) sum_t f_mt / p_t``
      (Dempster, Laird & Rubin 1977; for this objective Cover 1984), which never lowers
      ``L``.

    The best of them is kept, so ``L`` never falls. Because ``sum_m w_m g_m = 1`` and ``L``
    is concave, ``L(w*) - L(w) <= max_m g_m - 1``: iteration stops, cell by cell, once this
    certified gap is at most ``tol`` (typically within 10 iterations; steps are compared up
    to rounding, so the gap keeps shrinking where ``L`` no longer changes in its last bits).
    A cell that does not reach ``tol`` in ``max_iter`` iterations is reported, not hidden.

    Parameters
    ----------
    density : ndarray, shape (C, M, W)
        Member densities ``f_mt > 0`` at the truths of each cell's window (any positive value
        in slots where ``mask`` is False).
    mask : ndarray of bool, shape (C, W)
        At least one True per cell.
    tol : float
        Target certified gap (in units of the average log score).
    max_iter : int
        Maximum iterations per cell.

    Returns
    -------
    OptimalFit

    References
    ----------
    Hall, S. G. and Mitchell, J. (2007). Combining density forecasts. *International Journal of
    Forecasting* 23(1), 1-13.
    Geweke, J. and Amisano, G. (2011). Optimal prediction pools. *Journal of Econometrics*
    164(1), 130-141.
    Dempster, A. P., Laird, N. M. and Rubin, D. B. (1977). Maximum likelihood from incomplete
    data via the EM algorithm. *JRSS B* 39(1), 1-38.
    Cover, T. M. (1984). An algorithm for maximizing expected log investment return. *IEEE
    Transactions on Information Theory* 30(2), 369-373.
    Frank, M. and Wolfe, P. (1956). An algorithm for quadratic programming. *Naval Research
    Logistics Quarterly* 3(1-2), 95-110.
    """
    f = np.asarray(density, dtype=np.float64)
    mask = np.asarray(mask, dtype=bool)
    if f.ndim != 3 or mask.shape != (f.shape[0], f.shape[2]):
        raise PoolError(f"optimal_weights: expected density (C, M, W) and mask (C, W); got "
                        f"{f.shape} and {mask.shape}")
    n = mask.sum(axis=1)
    if (n == 0).any():
        raise PoolError("optimal_weights: every cell needs at least one scored forecast")
    f = np.where(mask[:, None, :], f, 1.0)
    if not (np.isfinite(f).all() and (f > 0).all()):
        raise PoolError("optimal_weights: densities must be finite and positive (floored) where "
                        "mask is True")
    c, m = f.shape[:2]
    inv_n = np.where(mask, 1.0 / n[:, None], 0.0)
    w = np.full((c, m), 1.0 / m)
    obj = np.empty(c)
    gap = np.empty(c)
    n_iter = np.zeros(c, dtype=np.int64)
    active = np.arange(c)
    for it in range(int(max_iter) + 1):
        fa, ia, wa = f[active], inv_n[active], w[active]
        p = _pool_density(wa, fa)
        ip = ia / p
        g = (fa * ip[:, None, :]).sum(axis=2)
        obj[active] = (ia * np.log(p)).sum(axis=1)
        gap[active] = g.max(axis=1) - 1.0
        go = gap[active] > tol
        if it == int(max_iter) or not go.any():
            break
        active, fa, ia, wa, g, ip, p = (active[go], fa[go], ia[go], wa[go], g[go], ip[go],
                                        p[go])
        cur = obj[active]
        w_em = _normalise(wa * g)
        # the face guess {g_m >= 1}: at the optimum exactly the members with weight
        # (strict complementarity), so Newton from there converges quadratically
        keep = (wa > 0) & (g >= 1.0 - 1e-12)  # g of a support member is 1 up to rounding
        keep[~keep.any(axis=1), :] = (wa > 0)[~keep.any(axis=1), :]  # rounding: sum w g < 1
        w_face = _normalise(np.where(keep, wa, 0.0))
        cands = [_newton_step(w_face, fa, ia, cur), _newton_step(wa, fa, ia, cur),
                 _frank_wolfe_step(wa, g, fa, ia, p), (w_em, _objective(w_em, fa, ia))]
        objs = np.stack([o for _, o in cands])
        # within rounding of the best, prefer a Newton step: near the optimum an EM or
        # Frank-Wolfe step may gain an ulp of L while leaving the gap where it is
        tie = 64 * np.finfo(float).eps * (1.0 + np.abs(cur))
        objs[:2] += tie
        pick = objs.argmax(axis=0)
        w[active] = np.stack([cw for cw, _ in cands])[pick, np.arange(active.size)]
        n_iter[active] += 1
    return OptimalFit(w, np.maximum(gap, 0.0), obj, n_iter, gap <= tol)
