"""Real-time forecast combination: pool the draws of a run's models with weights known at each origin.

The law of this module (tested as a property): the pool's weights and draws at origin ``o``
are a function of the members' forecasts made on or before ``o``, the truths *published on or
before* ``o``, the scheme's parameters and ``(seed, o)``; perturbing any truth published after
``o`` (or not yet published), or any forecast made after ``o``, leaves them unchanged.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from harness.pools._types import LEARNT, SCHEMES
from harness.pools.errors import PoolError, PoolWarning
from harness.pools.members import member_available, member_density, member_scores, resolve_score
from harness.pools.sampling import mixture_draws
from harness.pools.weights import equal_weights, inverse_score_weights, optimal_weights
from harness.pools.window import scored_window
from harness.scores import DEFAULT_DENSITY_FLOOR

__all__ = ["PoolResult", "combine"]


@dataclass(frozen=True)
class PoolResult:
    """A pool's forecasts and how they were weighted.

    Attributes
    ----------
    draws : ndarray, shape (O, V, H, D)
        Pooled draws (the members' dtype); NaN only where no member has a forecast.
    weights : ndarray of float64, shape (O, V, H, M)
        Weight of each member; on the simplex, 0 for a member without a forecast in the cell,
        NaN where no member has one.
    fallback : ndarray of bool, shape (O, V, H)
        True where a learnt scheme had fewer than ``min_scored`` scored forecasts and used
        equal weights (always False for ``scheme="equal"``).
    n_scored : ndarray of int64, shape (O, V, H)
        Scored forecasts in the window used at each origin.
    gap : ndarray of float64, shape (O, V, H)
        ``scheme="optimal"``: certified bound on the distance of the average log score to its
        maximum (see :func:`harness.pools.optimal_weights`); NaN elsewhere.
    scheme : str
    params : dict
        The scheme's parameters as used (JSON-able), for the ledger's provenance.
    warnings : tuple of dict
        One record per documented fallback: ``{"variable", "horizon", "origin", "message"}``
        (``None`` where a record concerns every value of that key).
    """

    draws: np.ndarray
    weights: np.ndarray
    fallback: np.ndarray
    n_scored: np.ndarray
    gap: np.ndarray
    scheme: str
    params: dict[str, Any]
    warnings: tuple[dict[str, Any], ...] = field(default_factory=tuple)


def _int_param(value: Any, name: str, low: int, allow_none: bool = False) -> int | None:
    if value is None and allow_none:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        extra = " or None" if allow_none else ""
        raise PoolError(f"combine: parameter {name!r} must be an integer >= {low}{extra}; got {value!r}")
    return int(value)


def _labels(given: Sequence | None, n: int, what: str) -> list[str]:
    if given is None:
        return [str(i) for i in range(n)]
    out = [str(x) for x in given]
    if len(out) != n:
        raise PoolError(f"combine: {len(out)} {what} labels given for {n} {what}s in draws")
    return out


def _validate(draws, origins, truth, truth_release) -> tuple[np.ndarray, ...]:
    x = np.asarray(draws)
    if x.ndim != 5:
        raise PoolError(f"combine: draws must have dims (model, origin, variable, horizon, draw); "
                        f"got {x.ndim} dims, shape {x.shape}")
    if not np.issubdtype(x.dtype, np.number):
        raise PoolError(f"combine: draws must be numeric; got dtype {x.dtype}")
    if x.dtype not in (np.float32, np.float64):
        x = x.astype(np.float64)
    m, o, v, h, d = x.shape
    if m < 2:
        raise PoolError(f"combine: a pool needs at least two member models; got {m}")
    if min(o, v, h, d) < 1:
        raise PoolError(f"combine: draws has an empty dimension, shape {x.shape}")
    try:
        org = np.asarray(origins).astype("datetime64[D]")
    except (TypeError, ValueError):
        raise PoolError(f"combine: origins must be dates (datetime64[D]); got {origins!r}") from None
    if org.shape != (o,):
        raise PoolError(f"combine: origins must have shape ({o},) to match draws; got {org.shape}")
    if np.isnat(org).any():
        raise PoolError(f"combine: origin {int(np.flatnonzero(np.isnat(org))[0])} is NaT")
    if o > 1 and not (np.diff(org.astype(np.int64)) > 0).all():
        i = int(np.flatnonzero(np.diff(org.astype(np.int64)) <= 0)[0])
        raise PoolError(f"combine: origins must be strictly increasing; origin {i + 1} "
                        f"({org[i + 1]}) is not after origin {i} ({org[i]})")
    y = np.asarray(truth, dtype=np.float64)
    if y.shape != (o, v, h):
        raise PoolError(f"combine: truth must have shape (origin, variable, horizon) = "
                        f"{(o, v, h)}; got {y.shape}")
    rel = np.asarray(truth_release)
    if rel.shape != (o, v, h) or not np.issubdtype(rel.dtype, np.datetime64):
        raise PoolError(f"combine: truth_release must be datetime64 of shape {(o, v, h)} "
                        f"(NaT = not yet published); got {rel.dtype} of shape {rel.shape}")
    if x.dtype == np.float32:
        # the ledger stores draws as float32: compare with the truth at that resolution, as the
        # scoring does, so a forecast equal to a published value has exactly zero error
        y = y.astype(np.float32).astype(np.float64)
    return x, org, y, rel.astype("datetime64[D]")


def combine(draws, origins, truth, truth_release, *, scheme: str = "equal",
            window: int | None = None, min_scored: int = 8,
            score: str | Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
            seed: int | np.random.SeedSequence = 0,
            density_floor: float = DEFAULT_DENSITY_FLOOR, tol: float = 1e-10,
            max_iter: int = 100, models: Sequence[str] | None = None,
            variables: Sequence[str] | None = None, horizons: Sequence | None = None,
            warn: bool = True) -> PoolResult:
    """Pool the members' draws with weights that use only truths published by each origin.

    Schemes, per origin ``o``, target variable and horizon (a *cell*):

    * ``"equal"``: the equal-weight linear pool.
    * ``"inverse_score"``: weights proportional to the inverse of each member's mean ``score``
      (default the CRPS) over the window (:func:`harness.pools.inverse_score_weights`).
    * ``"optimal"``: the weights on the simplex maximising the average log score of the pool
      over the window (Hall & Mitchell 2007; Geweke & Amisano 2011), each member's predictive
      density at a truth being the kernel density of :func:`harness.scores.log_score` (same
      bandwidth, same floor; :func:`harness.pools.member_density`), solved to a certified gap
      ``tol`` (:func:`harness.pools.optimal_weights`).

    **Window.** At origin ``o`` a forecast is *scored* when it was made at an earlier origin,
    its truth is finite with a release date on or before ``o``, and every member has a forecast
    (and, for ``inverse_score``, a finite score) there: members are always weighted on a
    common sample. Of those, the ``window`` most recent by origin are used (all if None).
    **Fallback.** Where fewer than ``min_scored`` scored forecasts exist, a learnt scheme uses
    equal weights and flags the cell in ``fallback``. **Failed members.** A member without a
    forecast in a cell (NaN draws: a failed task) gets weight 0 there and the others are
    renormalised; a cell where no member has a forecast gets NaN weights and draws (the
    ledger's mark of a missing forecast). Every fallback is listed in ``warnings``, and
    summarised once as a :class:`PoolWarning` when ``warn``.

    **Draws.** Stratified mixture sampling (:func:`harness.pools.mixture_draws`): member ``m``
    supplies ``floor(D w_m)`` or ``ceil(D w_m)`` of its own draws, at positions set by a
    generator derived from ``seed`` and the origin's date only.

    The truth to weight by is the caller's choice and should be a real-time one, e.g. the
    first release. ``truth_release`` is the day each truth became known: for ``first`` and
    ``release:K`` truths the release date; for a truth defined at a later vintage (``lag:``,
    ``asof:``) the later of the release date and that vintage day
    (:func:`harness.pools.truth_grid` builds both arrays).

    Parameters
    ----------
    draws : ndarray, shape (M, O, V, H, D)
        Member draws (M >= 2), dims (model, origin, variable, horizon, draw) as in the ledger.
    origins : ndarray of datetime64[D], shape (O,)
        Strictly increasing.
    truth : ndarray, shape (O, V, H)
        Truth of the forecast made at each origin for each variable and horizon (NaN = none).
    truth_release : ndarray of datetime64[D], shape (O, V, H)
        Day each truth became known; NaT = not yet published.
    scheme : {"equal", "inverse_score", "optimal"}
    window : int or None
        W, the number of most recent scored forecasts used (None: all).
    min_scored : int
        K, the scored forecasts needed before a learnt scheme leaves equal weights (K <= W).
    score : str or callable, optional
        ``inverse_score`` only: a name of :data:`harness.pools.SCORES` (default ``"crps"``) or
        ``(obs (n,), draws (n, m)) -> (n,)``, a non-negative loss.
    seed : int or numpy.random.SeedSequence
        Base of the per-origin generators of the mixture sampling.
    density_floor : float
        ``optimal`` only: floor of the kernel densities (as in the log score).
    tol, max_iter : float, int
        ``optimal`` only: certified gap and iteration limit of the solver.
    models, variables, horizons : sequences, optional
        Labels used in messages and warning records.
    warn : bool
        Issue one :class:`PoolWarning` when any fallback was used.

    Returns
    -------
    PoolResult

    Raises
    ------
    PoolError
        Fewer than two members, shapes that disagree, unsorted origins, an unknown scheme or
        score, a parameter out of range (each message names it and the allowed values).

    References
    ----------
    Hall, S. G. and Mitchell, J. (2007). Combining density forecasts. *International Journal of
    Forecasting* 23(1), 1-13.
    Geweke, J. and Amisano, G. (2011). Optimal prediction pools. *Journal of Econometrics*
    164(1), 130-141.
    Bates, J. M. and Granger, C. W. J. (1969). The combination of forecasts. *Operational
    Research Quarterly* 20(4), 451-468.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> draws = rng.normal(size=(2, 12, 1, 1, 200)) + np.array([0.0, 2.0])[:, None, None, None, None]
    >>> origins = np.datetime64("2020-01-01") + 7 * np.arange(12)
    >>> rel = (origins + 1)[:, None, None]
    >>> res = combine(draws, origins, rng.normal(size=(12, 1, 1)), rel, scheme="optimal",
    ...               min_scored=4, warn=False)
    >>> res.weights.shape, bool(res.fallback[:4].all()), bool(res.weights[-1, 0, 0, 0] > 0.5)
    ((12, 1, 1, 2), True, True)
    """
    x, org, y, rel = _validate(draws, origins, truth, truth_release)
    m, o, v, h, _ = x.shape
    if scheme not in SCHEMES:
        raise PoolError(f"combine: unknown scheme {scheme!r}; expected one of {sorted(SCHEMES)}")
    window = _int_param(window, "window", 1, allow_none=True)
    min_scored = _int_param(min_scored, "min_scored", 1)
    if window is not None and min_scored > window:
        raise PoolError(f"combine: min_scored ({min_scored}) exceeds window ({window}): the "
                        "pool would never leave its fallback")
    if score is not None and scheme != "inverse_score":
        raise PoolError(f"combine: parameter 'score' applies to scheme 'inverse_score' only; "
                        f"scheme {scheme!r} got score={score!r}")
    if not density_floor > 0:
        raise PoolError(f"combine: density_floor must be positive; got {density_floor!r}")
    model_l = _labels(models, m, "model")
    var_l = _labels(variables, v, "variable")
    hor_l = _labels(horizons, h, "horizon")
    params: dict[str, Any] = {"window": window, "min_scored": min_scored}

    avail = member_available(x)  # (M, O, V, H)
    every = avail.all(axis=0)
    if scheme == "inverse_score":
        score_name, score_fn = resolve_score("crps" if score is None else score)
        params["score"] = score_name
        values = member_scores(x, y, score_fn)
    elif scheme == "optimal":
        params.update(density_floor=float(density_floor), tol=float(tol), max_iter=int(max_iter))
        values = member_density(x, y, density_floor=density_floor)
    else:
        values = None
    scorable = np.isfinite(y) & every
    if values is not None:
        scorable &= np.isfinite(values).all(axis=0)
    index, count = scored_window(org, rel, scorable, window)

    weights = np.full((o, v, h, m), 1.0 / m)
    fallback = np.zeros((o, v, h), dtype=bool)
    gap = np.full((o, v, h), np.nan)
    records: list[dict[str, Any]] = []
    if values is not None:
        fit = count >= min_scored
        fallback = ~fit
        cells = np.nonzero(fit)
        if cells[0].size:
            slots = index[cells]  # (C, W) past origins, -1 = empty slot
            mask = slots >= 0
            vt = np.moveaxis(values, 0, -1)  # (O', V, H, M)
            win = vt[np.where(mask, slots, 0), cells[1][:, None], cells[2][:, None]]
            win = np.ascontiguousarray(np.moveaxis(win, -1, 1))  # (C, M, W)
            if scheme == "inverse_score":
                weights[cells] = inverse_score_weights(win, mask, score=params["score"])
            else:
                res = optimal_weights(win, mask, tol=tol, max_iter=max_iter)
                weights[cells] = res.weights
                gap[cells] = res.gap
                if not res.converged.all():
                    records.append({"variable": None, "horizon": None, "origin": None, "message": (
                        f"optimal weights stopped at max_iter={max_iter} in "
                        f"{int((~res.converged).sum())} cell(s); largest certified gap "
                        f"{float(res.gap.max()):.3g} (tol {tol:g})")})
        for j, k in zip(*np.nonzero(fallback.all(axis=0)), strict=True):
            records.append({"variable": var_l[j], "horizon": hor_l[k], "origin": None, "message": (
                f"fewer than min_scored={min_scored} scored forecasts at every origin "
                f"(at most {int(count[:, j, k].max())}): equal weights throughout")})
    # a member without a forecast in a cell gets weight 0; the others are renormalised (only
    # in those cells: every other cell keeps its weights to the last bit)
    avail_t = np.moveaxis(avail, 0, -1)  # (O, V, H, M)
    gone = ~avail_t.all(axis=-1)
    if gone.any():
        w = np.where(avail_t[gone], weights[gone], 0.0)
        tot = w.sum(axis=-1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            w = np.where(tot > 0, w / tot, np.nan)
        # weights learnt on members now missing fall back to equal shares of the others
        lost = (tot[..., 0] == 0) & avail_t[gone].any(axis=-1)
        w[lost] = equal_weights(avail_t[gone][lost])
        weights[gone] = w
        for i in range(m):
            n_fail = int((~avail[i]).sum())
            if n_fail:
                records.append({"variable": None, "horizon": None, "origin": None, "message": (
                    f"model {model_l[i]!r} has no forecast in {n_fail} cell(s) (failed tasks): "
                    "weight 0 there, the other members renormalised")})
        none = ~avail_t.any(axis=-1)
        if none.any():
            oo, jj, kk = np.argwhere(none)[0]
            records.append({"variable": None, "horizon": None, "origin": None, "message": (
                f"no member has a forecast in {int(none.sum())} cell(s) (first: origin "
                f"{org[oo]}, variable {var_l[jj]!r}, horizon {hor_l[kk]}): the pool has none there "
                "either")})
    pooled = mixture_draws(x, weights, org, seed)
    if records and warn:
        warnings.warn(f"pool ({scheme}): {len(records)} fallback record(s); first: "
                      f"{records[0]['message']}", PoolWarning, stacklevel=2)
    if scheme not in LEARNT:
        fallback = np.zeros((o, v, h), dtype=bool)
    return PoolResult(pooled, weights, fallback, count.astype(np.int64), gap, scheme, params,
                      tuple(records))
