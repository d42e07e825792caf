"""Dispatch of tasks through joblib's configured backend (loky, threading, dask), inline, or in sequence.

Small runs stay in the driver: starting a loky pool costs each worker its imports (a second
or two here) before the first result, more than a run of short tasks takes in total. So with
``loky`` the driver first runs tasks itself for :data:`INLINE_PILOT_SECONDS` (origin-major
order, so they sample every model) and times them; it starts the pool for the rest only when
those remaining would take longer inline than with the pool, start-up included
(:func:`_pool_pays`), and otherwise keeps weighing after each further task. Every task draws from its own seed, so where it ran changes nothing in
its results.
"""

from __future__ import annotations

import os
import time

from harness.backtest.plan import Plan, Task
from harness.backtest.worker import _execute

#: seconds a loky pool takes to start and import what a task needs, before its first result
POOL_START_SECONDS = 1.5
#: tasks run inline for this long (then one more task at a time) before their pace decides
INLINE_PILOT_SECONDS = 1.0


def _pool_pays(remaining_seconds: float, n_jobs: int, start: float) -> bool:
    """True when ``n_jobs`` workers, started now, finish ``remaining_seconds`` of work sooner than inline."""
    return n_jobs > 1 and remaining_seconds > start + remaining_seconds / n_jobs


def _args(plan: Plan, todo: list[Task], cache: str):
    spec = plan.spec
    pid = os.getpid()
    return [(plan.models[t.model], plan.info_for(t), plan.targets_for(t), spec.draws, spec.seed, t.seed_key,
             t.key, cache, {"model": t.model, "origin": str(t.origin)}, pid) for t in todo]


def _dispatch(plan: Plan, todo: list[Task], *, jobs, backend, scheduler, cache: str,
              inline_seconds: float | None = None):
    """Yield task records as they complete.

    Parameters
    ----------
    inline_seconds : float, optional
        The pool start-up cost assumed by the inline pilot (default :data:`POOL_START_SECONDS`);
        0 sends every task to the pool. Only the ``loky`` backend runs a pilot.
    """
    args = _args(plan, todo, cache)
    n_jobs = jobs or os.cpu_count() or 1
    if backend == "sequential" or (backend == "loky" and n_jobs == 1):
        for a in args:
            yield _execute(*a)
        return
    start = POOL_START_SECONDS if inline_seconds is None else float(inline_seconds)
    if backend == "loky" and start > 0:
        t0 = time.perf_counter()
        t_first = None
        done = 0
        while done < len(args):
            yield _execute(*args[done])
            done += 1
            now = time.perf_counter()
            t_first = now if t_first is None else t_first
            if now - t0 >= INLINE_PILOT_SECONDS:
                # the pace after the first task (which pays one-time imports), if there is one
                pace = (now - t_first) / (done - 1) if done > 1 else now - t0
                if _pool_pays(pace * (len(args) - done), n_jobs, start):
                    break
        args = args[done:]
        if not args:
            return
    yield from _parallel(args, n_jobs=n_jobs, backend=backend, scheduler=scheduler)


def _parallel(args, *, n_jobs: int, backend: str, scheduler):
    """The tasks through ``joblib.Parallel``; an interrupt or error shuts the pool down, killing workers."""
    from joblib import Parallel, delayed, parallel_config

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
    extra = {}
    if backend == "loky":
        from harness.backtest.process import worker_init

        extra = {"initializer": worker_init, "initargs": (os.getpid(),)}
    with parallel_config(backend=backend, n_jobs=n_jobs, **extra):
        gen = Parallel(return_as="generator_unordered", batch_size=1)(calls)
        try:
            yield from gen
        except BaseException:
            _kill_loky_workers()
            raise
        finally:
            gen.close()


def _kill_loky_workers() -> None:
    """Terminate the reusable loky executor's workers at once (an interrupted run leaves none behind)."""
    try:
        from joblib.externals.loky import reusable_executor
    except ImportError:  # pragma: no cover - joblib always vendors loky
        return
    executor = getattr(reusable_executor, "_executor", None)
    if executor is not None:
        executor.shutdown(wait=False, kill_workers=True)
