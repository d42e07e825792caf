"""Dispatch of tasks through joblib's configured backend (loky, threading, dask) or in sequence."""

from __future__ import annotations

import os

from harness.backtest.plan import Plan, Task
from harness.backtest.worker import _execute


def _dispatch(plan: Plan, todo: list[Task], *, jobs, backend, scheduler):
    """Yield task records as they complete, through joblib's configured backend."""
    from joblib import Parallel, delayed, parallel_config

    spec = plan.spec
    args = [(plan.models[t.model], plan.info_for(t), plan.targets_for(t), spec.draws, spec.seed, t.seed_key,
             t.key, str(spec.cache_dir), {"model": t.model, "origin": str(t.origin)}) for t in todo]
    n_jobs = jobs or os.cpu_count() or 1
    if backend == "sequential":
        for a in args:
            yield _execute(*a)
        return
    calls = (delayed(_execute)(*a) for a in args)
    if backend == "dask":
        from dask.distributed import Client, LocalCluster

        cluster = None
        if scheduler:
            client = Client(scheduler)
        else:
            cluster = LocalCluster(n_workers=n_jobs, threads_per_worker=1, processes=True,
                                   dashboard_address=None)
            client = Client(cluster)
        try:
            with parallel_config(backend="dask"):
                yield from Parallel(n_jobs=-1, return_as="generator_unordered")(calls)
        finally:
            client.close()
            if cluster is not None:
                cluster.close()
        return
    with parallel_config(backend=backend, n_jobs=n_jobs):
        yield from Parallel(return_as="generator_unordered", batch_size=1)(calls)
