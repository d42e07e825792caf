"""Real-time forecast combination ("pools") over the models of a run.

A pool is computed from its members' draws with weights that use, at each origin, only the
truths published by that origin; it is stored as draws with the models' contract and scored
like a model. Schemes: equal weights, inverse mean score (e.g. CRPS) over a trailing window,
and the optimal linear pool maximising the average log score (Hall & Mitchell 2007; Geweke &
Amisano 2011).

* :func:`combine` - the pool on arrays (members, origins, truths and their release dates);
* :func:`combine_dataarray`, :func:`stack_members`, :func:`truth_grid`, :func:`weights_frame`
  - the same on the ledger's labelled arrays, and a weights table to store;
* the parts: :func:`scored_window` (the real-time window), :func:`member_scores` /
  :func:`member_density` (what weights learn from), :func:`equal_weights`,
  :func:`inverse_score_weights`, :func:`optimal_weights`, :func:`mean_log_pool`,
  :func:`mixture_draws` (stratified mixture sampling), :func:`origin_seed`.
"""

from __future__ import annotations

from harness.pools._types import SCHEMES, PoolScheme
from harness.pools.combine import PoolResult, combine
from harness.pools.errors import PoolError, PoolWarning
from harness.pools.frame import combine_dataarray, stack_members, truth_grid, weights_frame
from harness.pools.members import SCORES, member_available, member_density, member_scores
from harness.pools.sampling import mixture_draws, origin_seed
from harness.pools.weights import (
    OptimalFit,
    equal_weights,
    inverse_score_weights,
    mean_log_pool,
    optimal_weights,
)
from harness.pools.window import scored_window

__all__ = [
    "SCHEMES",
    "SCORES",
    "OptimalFit",
    "PoolError",
    "PoolResult",
    "PoolScheme",
    "PoolWarning",
    "combine",
    "combine_dataarray",
    "equal_weights",
    "inverse_score_weights",
    "mean_log_pool",
    "member_available",
    "member_density",
    "member_scores",
    "mixture_draws",
    "optimal_weights",
    "origin_seed",
    "scored_window",
    "stack_members",
    "truth_grid",
    "weights_frame",
]
