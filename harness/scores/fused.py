"""Every registered score in one pass over the draws: each chunk of rows is sorted once and reused.

:func:`score_all` asks the registry (:mod:`harness.scores.registry`) which columns to compute and
which quantile levels they need, computes those quantiles once per chunk, and hands a
:class:`Chunk` to each declaration's ``compute``. The public rules (:func:`crps_sorted`,
:func:`quantile_score`, :func:`log_score`, …) are the readable references the tests bind this
pass to.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from harness.scores.kernels import (
    DEFAULT_COVERAGE_LEVELS,
    DEFAULT_DENSITY_FLOOR,
    DEFAULT_QUANTILE_LEVELS,
    QuantileMethod,
    _check,
    _check_levels,
    _check_method,
    _mean_from_sorted,
    _pinball,
    _quantiles_from_sorted,
    _row_chunks,
    _sort_rows,
)
from harness.scores.registry import DEFAULT_INTERVAL_LEVELS, ScoreConfig, columns, scores

__all__ = ["Chunk", "score_all"]


@dataclass
class Chunk:
    """Sorted rows of one chunk and the quantities several scores share (computed once)."""

    s: np.ndarray  # (rows, m) sorted, NaN last
    k: np.ndarray  # (rows,) non-NaN counts
    full: bool  # no NaN in the chunk
    y: np.ndarray  # (rows,) observations
    levels: np.ndarray  # all quantile levels needed, sorted unique
    q: np.ndarray  # (rows, len(levels)) quantiles (the config's method)
    _cache: dict = field(default_factory=dict)

    def quantiles(self, levels) -> np.ndarray:
        """Quantiles at ``levels`` (each must be among :attr:`levels`)."""
        idx = np.searchsorted(self.levels, np.asarray(levels, dtype=np.float64))
        return self.q[:, idx]

    def pinball(self, levels) -> np.ndarray:
        """Quantile scores ``(rows, len(levels))`` at ``levels``."""
        lev = np.asarray(levels, dtype=np.float64)
        key = ("pinball", lev.tobytes())
        if key not in self._cache:
            self._cache[key] = _pinball(self.y, self.quantiles(lev), lev)
        return self._cache[key]

    @property
    def mean(self) -> np.ndarray:
        if "mean" not in self._cache:
            self._cache["mean"] = _mean_from_sorted(self.s, self.k, self.full)
        return self._cache["mean"]

    @property
    def median(self) -> np.ndarray:
        """numpy's linear median, whatever the config's quantile method."""
        if "median" not in self._cache:
            self._cache["median"] = _quantiles_from_sorted(self.s, self.k, np.array([0.5]), "linear")[:, 0]
        return self._cache["median"]


def score_all(obs, draws, *, quantile_levels=DEFAULT_QUANTILE_LEVELS,
              coverage_levels=DEFAULT_COVERAGE_LEVELS, interval_levels=DEFAULT_INTERVAL_LEVELS,
              n_levels: int = 99, method: QuantileMethod = "linear",
              density_floor: float = DEFAULT_DENSITY_FLOOR, chunk_rows: int | None = None,
              n_threads: int = 1) -> dict[str, np.ndarray]:
    """Every registered per-forecast score in one pass.

    The columns are those of :func:`harness.scores.registry.columns` under the levels given:
    ``crps``, ``crps_centre``, ``crps_tails``, ``crps_left``, ``crps_right`` (quantile-weighted),
    ``log_score``, ``se_mean``, ``ae_mean``, ``se_median``, ``ae_median``, ``qs_NN`` per
    quantile level, ``cover_NN`` per coverage level, ``interval_NN`` per interval level, ``pit``.

    Memory is bounded by the chunk: a handful of ``(chunk_rows, m)`` float64 temporaries
    (about 64 MB each by default), plus the input itself.

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m), float32 or float64
    quantile_levels, coverage_levels, interval_levels : sequence of float
        Levels of the families (whole percentages).
    n_levels : int
        Midpoint nodes of the quantile-weighted CRPS integrals.
    method : {"inverted_cdf", "linear"}
        Quantile estimator of the quantile scores, weighted CRPS, intervals and coverage.
    density_floor : float
        Floor of the kernel density in the log score.
    chunk_rows : int, optional
        Rows per chunk (default: about 64 MB of float64 per temporary).
    n_threads : int
        Threads over chunks (numpy releases the GIL in sorts and ufuncs). Keep 1 inside
        process-parallel workers.

    Returns
    -------
    dict[str, ndarray]
        Each of shape (n,), in registry order.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> out = score_all(rng.normal(size=3), rng.normal(size=(3, 500)))
    >>> sorted(out)[:4], out["crps"].shape
    (['ae_mean', 'ae_median', 'cover_50', 'cover_70'], (3,))
    """
    _check_method(method, "score_all")
    y, x = _check(obs, draws, "score_all")
    for name, lv in (("quantile_levels", quantile_levels), ("coverage_levels", coverage_levels),
                     ("interval_levels", interval_levels)):
        _check_levels(lv, "score_all", name)
    if not density_floor > 0:
        raise ValueError(f"score_all: density_floor must be positive; got {density_floor!r}")
    if int(n_levels) != n_levels or n_levels < 1:
        raise ValueError(f"score_all: n_levels must be a positive integer; got {n_levels!r}")
    if int(n_threads) != n_threads or n_threads < 1:
        raise ValueError(f"score_all: n_threads must be a positive integer; got {n_threads!r}")
    cfg = ScoreConfig(tuple(float(a) for a in quantile_levels), tuple(float(a) for a in coverage_levels),
                      tuple(float(a) for a in interval_levels), int(n_levels), method, float(density_floor))
    cols = columns(cfg)  # validates the level names
    decls = [s for s in scores() if s.compute is not None]
    levels = np.unique(np.concatenate([s.needs(cfg) for s in decls] + [np.zeros(0)]))
    n = y.shape[0]
    out = {c.name: np.empty(n) for c in cols}

    def work(sl: slice) -> None:
        s, k, full = _sort_rows(x[sl])
        q = _quantiles_from_sorted(s, k, levels, method) if levels.size else np.zeros((len(k), 0))
        ch = Chunk(s, k, full, y[sl], levels, q)
        for d in decls:
            for name, v in d.compute(ch, cfg).items():
                out[name][sl] = v

    chunks = _row_chunks(n, x.shape[1], chunk_rows)
    if n_threads == 1 or len(chunks) == 1:
        for sl in chunks:
            work(sl)
    else:
        with ThreadPoolExecutor(max_workers=int(n_threads)) as pool:
            list(pool.map(work, chunks))
    return out
