"""The task worker: fit one model at one origin, validate and write its draws, never raise."""

from __future__ import annotations

import os
import sys
import time
import traceback

import numpy as np

from harness.backtest import diagnostics as _diag
from harness.backtest.cache import TaskCache
from harness.backtest.process import watch_parent
from harness.models.contract import validate_forecast

_LIMITER: dict = {"controller": None, "modules": -1}


def _one_blas_thread():
    """A context limiting BLAS/OpenMP pools to one thread, from a cached controller.

    Finding the loaded libraries costs about 1.5 ms a task; they change only when modules are
    imported, so the controller is rebuilt only then (``threadpool_limits`` scans every time).
    """
    from threadpoolctl import ThreadpoolController

    n = len(sys.modules)
    if _LIMITER["controller"] is None or _LIMITER["modules"] != n:
        _LIMITER["controller"], _LIMITER["modules"] = ThreadpoolController(), n
    return _LIMITER["controller"].limit(limits=1)


def _execute(model, info, targets, n_draws: int, seed: int, skey, key: str, cache_dir: str, meta: dict,
             driver_pid: int | None = None) -> dict:
    """Worker: fit one model at one origin, write its draws, return a small record (never raises).

    The record: model, origin, key, pid, status (``ok``/``failed``), elapsed, and for a failure
    its error and traceback; the draws, provenance and the model's ``diagnostics_`` go to the
    task cache (``diagnostics`` is also in the record, for the run's table).
    """
    if driver_pid is not None:
        watch_parent(driver_pid)  # a loky worker leaves when its driver dies (also in worker_init)
    t0 = time.perf_counter()
    rec = dict(meta, key=key, pid=os.getpid())
    cache = TaskCache(cache_dir)
    try:
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=tuple(skey)))
        _diag.clear(model)
        with _one_blas_thread():
            da = model.forecast(info, targets, n_draws, rng)
        da = validate_forecast(da, targets, n_draws, model=getattr(model, "name", None))
        diag = _diag.take(model)
        prov = {v: [str(info.last_observed[v]), str(info.source_release[v])] for v in info.variables}
        elapsed = time.perf_counter() - t0
        cache.write_task(key, da, [str(p) for p in targets.periods()],
                         dict(meta, key=key, seed_key=list(skey), elapsed=elapsed, provenance=prov,
                              diagnostics=diag))
        rec.update(status="ok", elapsed=elapsed, diagnostics=diag)
    except Exception as exc:  # a failing task never stops the run: keep its traceback
        rec.update(status="failed", elapsed=time.perf_counter() - t0,
                   error=f"{type(exc).__name__}: {exc}", traceback=traceback.format_exc())
        try:
            cache.write_failure(key, rec)
        except Exception as wexc:  # even an unwritable cache must not lose the record
            rec["error"] += f" (and the failure could not be cached: {wexc})"
    return rec
