"""The task worker: fit one model at one origin, validate and write its draws, never raise."""

from __future__ import annotations

import os
import time
import traceback
from pathlib import Path

import numpy as np

from harness.backtest.ledger import write_failure, write_task
from harness.errors import TaskOutputError


def _validate_draws(da, targets, n_draws):
    import xarray as xr

    if not isinstance(da, xr.DataArray):
        raise TaskOutputError(f"forecast() returned {type(da).__name__}, expected an xarray.DataArray")
    if set(da.dims) != {"draw", "variable", "horizon"}:
        raise TaskOutputError(f"forecast() returned dims {da.dims}, expected ('draw', 'variable', 'horizon')")
    da = da.transpose("draw", "variable", "horizon")
    if da.sizes["draw"] != n_draws:
        raise TaskOutputError(f"forecast() returned {da.sizes['draw']} draws, expected {n_draws}")
    if [str(v) for v in da["variable"].values] != list(targets.variables):
        raise TaskOutputError(f"forecast() returned variables {list(da['variable'].values)}, "
                              f"expected {list(targets.variables)}")
    if [int(h) for h in da["horizon"].values] != list(targets.horizons):
        raise TaskOutputError(f"forecast() returned horizons {list(da['horizon'].values)}, "
                              f"expected {list(targets.horizons)}")
    vals = np.asarray(da.values, dtype=np.float64)
    if not np.isfinite(vals).all():
        bad = int((~np.isfinite(vals)).sum())
        raise TaskOutputError(f"forecast() returned {bad} NaN or infinite draws")
    return da


def _execute(model, info, targets, n_draws: int, seed: int, skey, key: str, cache_dir: str, meta: dict) -> dict:
    """Worker: fit one model at one origin, write its draws, return a small record (never raises)."""
    from threadpoolctl import threadpool_limits

    t0 = time.perf_counter()
    rec = dict(meta, key=key, pid=os.getpid())
    try:
        rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=tuple(skey)))
        with threadpool_limits(limits=1):
            da = model.forecast(info, targets, n_draws, rng)
        da = _validate_draws(da, targets, n_draws)
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
