"""The task worker: fit one model at one origin, validate and write its draws, never raise."""

from __future__ import annotations

import os
import time
import traceback
from pathlib import Path

import numpy as np

from harness.backtest.ledger import write_failure, write_task
from harness.models.contract import validate_forecast


def _execute(model, info, targets, n_draws: int, seed: int, skey, key: str, cache_dir: str, meta: dict) -> dict:
    """Worker: fit one model at one origin, write its draws, return a small record (never raises)."""
    from threadpoolctl import threadpool_limits

    t0 = time.perf_counter()
    rec = dict(meta, key=key, pid=os.getpid())
    try:
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=tuple(skey)))
        with threadpool_limits(limits=1):
            da = model.forecast(info, targets, n_draws, rng)
        da = validate_forecast(da, targets, n_draws, model=getattr(model, "name", None))
        prov = {v: [str(info.last_observed[v]), str(info.source_release[v])] for v in info.variables}
        elapsed = time.perf_counter() - t0
        write_task(Path(cache_dir), key, da, [str(p) for p in targets.periods()],
                   dict(meta, key=key, seed_key=list(skey), elapsed=elapsed, provenance=prov))
        rec.update(status="ok", elapsed=elapsed)
    except Exception as exc:  # a failing task never stops the run: keep its traceback
        rec.update(status="failed", elapsed=time.perf_counter() - t0,
                   error=f"{type(exc).__name__}: {exc}", traceback=traceback.format_exc())
        write_failure(Path(cache_dir), key, rec)
    return rec
