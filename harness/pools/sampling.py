"""Pooled draws from member draws: stratified mixture sampling, one generator per origin.

At each origin the pool's generator comes from the run's seed and the origin's date alone
(:func:`origin_seed`), so a pool's draws at an origin never depend on which other origins,
cells or members' later forecasts were computed in the same call.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np

from harness.pools.errors import PoolError

__all__ = ["mixture_draws", "origin_seed"]

_EPOCH_ORDINAL = _dt.date(1970, 1, 1).toordinal()


def origin_seed(seed: int | np.random.SeedSequence, origin: np.datetime64) -> np.random.SeedSequence:
    """The seed sequence of one origin: the base sequence's entropy, spawn key extended by the date.

    The date enters as its proleptic Gregorian ordinal (a positive integer), so the stream is
    the same whatever the order or number of origins pooled.
    """
    base = seed if isinstance(seed, np.random.SeedSequence) else np.random.SeedSequence(int(seed))
    day = int(np.datetime64(origin, "D").astype(np.int64)) + _EPOCH_ORDINAL
    return np.random.SeedSequence(base.entropy, spawn_key=(*base.spawn_key, day))


def mixture_draws(draws: np.ndarray, weights: np.ndarray, origins: np.ndarray,
                  seed: int | np.random.SeedSequence = 0) -> np.ndarray:
    """Draws of the linear pool ``sum_m w_m F_m`` by stratified (systematic) mixture sampling.

    Per origin, one uniform ``U`` and one random permutation ``pi`` of the draw indices give
    ``u_d = (pi(d) + U) / D``; pooled draw ``d`` of a cell is member ``m``'s draw ``d`` for the
    member whose cumulative-weight interval ``[W_{m-1}, W_m)`` holds ``u_d``. So member ``m``
    supplies ``floor(D w_m)`` or ``ceil(D w_m)`` draws (systematic resampling: less Monte Carlo
    noise than independent choices), each a distinct draw of that member, at random draw
    positions; members of weight 0 are never chosen. The same ``u`` serve every variable and
    horizon of the origin, so where the weights agree across cells (e.g. equal weights) pooled
    draw ``d`` is one member's whole path, and the joint (path) structure of the draws is kept;
    elsewhere the draws are right marginally per cell.

    Parameters
    ----------
    draws : ndarray, shape (M, O, V, H, D)
    weights : ndarray, shape (O, V, H, M)
        On the simplex; a cell of NaN weights (no member available) gives NaN draws.
    origins : ndarray of datetime64[D], shape (O,)
    seed : int or numpy.random.SeedSequence

    Returns
    -------
    ndarray, shape (O, V, H, D), the dtype of ``draws``

    References
    ----------
    Kitagawa, G. (1996). Monte Carlo filter and smoother for non-Gaussian nonlinear state space
    models. *Journal of Computational and Graphical Statistics* 5(1), 1-25 (systematic /
    stratified resampling).
    """
    m, o, v, h, d = draws.shape
    if weights.shape != (o, v, h, m):
        raise PoolError(f"mixture_draws: weights must have shape {(o, v, h, m)}; got {weights.shape}")
    u = np.empty((o, d))
    for i in range(o):
        rng = np.random.default_rng(origin_seed(seed, origins[i]))
        u[i] = (rng.permutation(d) + rng.random()) / d
    missing = np.isnan(weights).any(axis=-1)
    cum = np.cumsum(np.where(missing[..., None], 0.0, weights), axis=-1)
    cum = cum / np.where(cum[..., -1:] > 0, cum[..., -1:], 1.0)
    # member index = number of cumulative bounds W_0..W_{M-2} at or below u
    pick = np.zeros((o, v, h, d), dtype=np.intp)
    for j in range(m - 1):
        pick += u[:, None, None, :] >= cum[..., j, None]
    out = np.take_along_axis(draws, pick[None], axis=0)[0]
    if missing.any():
        out = out.astype(draws.dtype, copy=True)
        out[missing] = np.nan
    return out
