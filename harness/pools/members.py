"""What the weights learn from: each member's score, or predictive density, at each truth.

Every function here works forecast by forecast (one row of draws and one truth), so the value
of the forecast made at origin ``o'`` depends on that forecast and its truth alone (down to
the last bit: rows are scored one origin at a time). Rows are
passed to the project's score functions (:mod:`harness.scores`), so a pool is weighted by the
very numbers its members are scored by.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from harness.pools.errors import PoolError
from harness.scores import DEFAULT_DENSITY_FLOOR, crps_sorted, log_score, point_errors

__all__ = ["SCORES", "member_available", "member_density", "member_scores", "resolve_score"]

ScoreFn = Callable[[np.ndarray, np.ndarray], np.ndarray]


def _se_mean(obs: np.ndarray, draws: np.ndarray) -> np.ndarray:
    return point_errors(obs, draws)["se_mean"]


def _ae_median(obs: np.ndarray, draws: np.ndarray) -> np.ndarray:
    return point_errors(obs, draws)["ae_median"]


#: positive loss scores (lower is better) that inverse-score weights may use by name
SCORES: dict[str, ScoreFn] = {"ae_median": _ae_median, "crps": crps_sorted, "se_mean": _se_mean}


def resolve_score(score: str | ScoreFn) -> tuple[str, ScoreFn]:
    """A score name of :data:`SCORES` or a callable ``(obs (n,), draws (n, m)) -> (n,)``."""
    if callable(score):
        return getattr(score, "__name__", "score"), score
    if isinstance(score, str) and score in SCORES:
        return score, SCORES[score]
    raise PoolError(f"pool score must be one of {sorted(SCORES)} or a callable "
                    f"(obs (n,), draws (n, m)) -> (n,); got {score!r}")


def member_available(draws: np.ndarray) -> np.ndarray:
    """``(M, O, V, H)`` True where a member's forecast exists: every draw finite (NaN = failed task)."""
    return np.isfinite(draws).all(axis=-1)


def _per_row(draws: np.ndarray, truth: np.ndarray, fn: ScoreFn, name: str) -> np.ndarray:
    """Apply ``fn`` to every available member forecast, origin by origin; NaN where the member failed.

    One call per origin: the rows passed for origin ``o`` are that origin's forecasts only, so
    their scores are the same floating-point numbers whatever the other origins hold (a BLAS
    kernel may round a row differently in a batch of another size). Rows with a failed member
    are left out, so every row passed has all its draws and the score functions take the same
    path for every row (no NaN branch).
    """
    m, o, v, h, d = draws.shape
    out = np.full((m, o, v, h), np.nan)
    for i in range(o):
        rows = draws[:, i].reshape(m * v * h, d)
        obs = np.broadcast_to(truth[i], (m, v, h)).reshape(-1)
        ok = np.isfinite(rows).all(axis=1)
        if not ok.any():
            continue
        val = np.asarray(fn(obs[ok], rows[ok]), dtype=np.float64)
        if val.shape != (int(ok.sum()),):
            raise PoolError(f"pool score {name!r} returned shape {val.shape}; expected one value "
                            f"per forecast, shape ({int(ok.sum())},)")
        res = np.full(m * v * h, np.nan)
        res[ok] = val
        out[:, i] = res.reshape(m, v, h)
    return out


def member_scores(draws: np.ndarray, truth: np.ndarray, score: str | ScoreFn = "crps") -> np.ndarray:
    """Each member's score of each forecast against its truth.

    Parameters
    ----------
    draws : ndarray, shape (M, O, V, H, D)
        Member draws (float32 as stored in the ledger, or float64).
    truth : ndarray, shape (O, V, H)
        Truth of the forecast made at each origin (NaN = missing: the score is NaN).
    score : str or callable
        A name of :data:`SCORES` or ``(obs (n,), draws (n, m)) -> (n,)``.

    Returns
    -------
    ndarray of float64, shape (M, O, V, H)
        NaN where the truth is missing or the member failed.
    """
    name, fn = resolve_score(score)
    return _per_row(draws, truth, fn, name)


def member_density(draws: np.ndarray, truth: np.ndarray, *,
                   density_floor: float = DEFAULT_DENSITY_FLOOR) -> np.ndarray:
    """Each member's predictive density at its truth: the kernel density of the project's log score.

    ``f = exp(-log_score)``, with :func:`harness.scores.log_score`'s Gaussian kernel, Silverman
    bandwidth and floor: ``f >= density_floor`` everywhere, so a member's mean log density
    equals minus its mean log score exactly, and an ensemble without spread (an already
    published target) has the floor density.

    Parameters
    ----------
    draws : ndarray, shape (M, O, V, H, D)
    truth : ndarray, shape (O, V, H)
    density_floor : float
        As in :func:`harness.scores.log_score`.

    Returns
    -------
    ndarray of float64, shape (M, O, V, H)
        NaN where the truth is missing or the member failed.

    References
    ----------
    Silverman, B. W. (1986). Density Estimation for Statistics and Data Analysis. Chapman &
    Hall, eq. (3.31).
    """
    def density(obs: np.ndarray, rows: np.ndarray) -> np.ndarray:
        return np.exp(-log_score(obs, rows, density_floor=density_floor))

    return _per_row(draws, truth, density, "log_score")
