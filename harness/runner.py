"""The backtest runner: tasks = model × origin, refit in parallel, seeded, cached, resumable.

Data flow: the spec names a store; the cube is built once in the driver; the information set of
every origin is built there in one vectorised pass (:func:`vintages.infoset.build_infosets`) and
shipped with its task, so workers never read the store. Each task is sent through
``joblib.Parallel`` — loky locally, or dask.distributed via joblib's dask backend — to a
module-level worker that returns a small record (status, timing, traceback on failure) and
writes the draws to the cache itself, atomically.

Determinism: every task draws from ``numpy.random.SeedSequence(spec.seed, spawn_key=(crc32(model
label), origin day))``; BLAS is limited to one thread inside a task; results are therefore the
same whatever the backend, the number of workers or the order of completion.

Cache: a task's key hashes the model's type, parameters, declared version and source code, the
information set's data, the targets, the number of draws and the seed key. A completed key is
never recomputed; a failed key is rerun only with ``retry_failed``.
"""

from __future__ import annotations

import hashlib
import inspect
import json
import os
import platform
import shutil
import sys
import time
import traceback
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from harness.errors import TaskOutputError
from harness.ledger import assemble, failure_path, task_path, write_failure, write_task
from harness.progress import Progress
from harness.spec import Spec

BACKENDS = ("dask", "loky", "sequential", "threading")


@dataclass
class Task:
    """One model refit at one origin."""

    model: str
    origin: np.datetime64
    key: str
    seed_key: tuple[int, int]
    index: int  # position of the origin in the plan


@dataclass
class Plan:
    """Everything a run needs, resolved: origins, information sets, targets, model objects, tasks."""

    spec: Spec
    store_checksum: str
    origins: np.ndarray
    infos: list
    targets: list
    models: dict
    tasks: list[Task]
    timings: dict = field(default_factory=dict)
    store_batches: int = 0

    def explain(self) -> str:
        """A human-readable description of the resolved plan (``harness run --explain``)."""
        s = self.spec
        cache = s.cache_dir
        done = sum(task_path(cache, t.key).is_file() for t in self.tasks)
        failed = sum(failure_path(cache, t.key).is_file() and not task_path(cache, t.key).is_file()
                     for t in self.tasks)
        lines = [
            f"spec        {s.path} (hash {s.hash()[:12]})",
            f"store       {s.store} (checksum {self.store_checksum[:12]})",
            f"mode        {s.mode}; ragged edge policy {s.policy}; panel frequency {s.freq}",
            f"origins     {len(self.origins)}: {self.origins[0]} … {self.origins[-1]}" if len(self.origins) else
            "origins     none",
            "variables   " + ", ".join(f"{k} ({v['transform']}{', ' + v['convert'] if 'convert' in v else ''})"
                                        for k, v in s.variables.items()),
            f"targets     {', '.join(s.targets)} at horizons {s.horizons[0]}…{s.horizons[-1]}"
            f" (h<0 backcast, 0 nowcast, >0 forecast)",
            "models      " + "; ".join(f"{m.name} = {m.type} {json.dumps(m.params) if m.params else ''}".strip()
                                        for m in s.models),
            f"draws       {s.draws} per forecast; seed {s.seed}",
            f"tasks       {len(self.tasks)} ({len(s.models)} models × {len(self.origins)} origins): "
            f"{done} cached, {failed} failed before, {len(self.tasks) - done - failed} to compute",
            f"run dir     {s.out}",
        ]
        if len(self.infos):
            first = self.infos[-1]
            edge = ", ".join(f"{v} {first.last_observed[v]}" for v in first.variables)
            lines.append(f"ragged edge at {self.origins[-1]}: {edge}")
        return "\n".join(lines)


def _model_code_hash(cls) -> str:
    try:
        src = inspect.getsource(sys.modules[cls.__module__])
    except (OSError, TypeError, KeyError):
        src = cls.__qualname__
    return hashlib.sha256(src.encode()).hexdigest()[:16]


def seed_key(model: str, origin: np.datetime64) -> tuple[int, int]:
    """The stable spawn key of a (model label, origin) pair."""
    return (zlib.crc32(model.encode()), int(np.datetime64(origin, "D").astype(np.int64)))


def task_key(spec: Spec, model_spec, model_cls, info, targets, skey) -> str:
    payload = {
        "type": model_spec.type,
        "class": f"{model_cls.__module__}:{model_cls.__qualname__}",
        "params": model_spec.params,
        "version": str(getattr(model_cls, "version", "0")),
        "code": _model_code_hash(model_cls),
        "data": info.data_hash(),
        "policy": info.policy,
        "transforms": info.transforms,
        "targets": [list(targets.variables), list(targets.horizons), str(targets.current)],
        "draws": spec.draws,
        "seed": spec.seed,
        "seed_key": list(skey),
    }
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()[:32]


def make_plan(spec: Spec) -> Plan:
    """Resolve a spec: open the store, schedule origins, build information sets, key every task."""
    from harness.models.base import get_model_class
    from vintages import VintageStore, build_infosets, check_origins, make_targets, parse_schedule

    t0 = time.perf_counter()
    store = VintageStore(spec.store)
    missing = [v for v in spec.variables if v not in store.variables]
    if missing:
        from harness.errors import SpecError

        raise SpecError(f"{spec.path}: [variables] {missing} not in the store {spec.store}; "
                        f"it holds: {', '.join(sorted(store.variables))}")
    cube = store.cube(variables=list(spec.variables))
    origins = check_origins(cube, parse_schedule(spec.origins, cube=cube))
    t1 = time.perf_counter()
    infos = build_infosets(cube, origins, spec.variables, freq=spec.freq, policy=spec.policy, mode=spec.mode)
    targets = [make_targets(info, spec.targets, spec.horizons, spec.freq) for info in infos]
    t2 = time.perf_counter()
    models, tasks = {}, []
    for ms in spec.models:
        cls = get_model_class(ms.type)
        models[ms.name] = cls(**ms.params)
        for i, (o, info, tg) in enumerate(zip(origins, infos, targets, strict=True)):
            sk = seed_key(ms.name, o)
            tasks.append(Task(ms.name, o, task_key(spec, ms, cls, info, tg, sk), sk, i))
    return Plan(spec, store.checksum(), origins, infos, targets, models, tasks,
                {"store_and_origins": t1 - t0, "infosets": t2 - t1, "keys": time.perf_counter() - t2},
                store_batches=len(store.manifest()["batches"]))


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


@dataclass
class RunResult:
    """What a run did: counts, timings, failures, and where the ledger is."""

    run_dir: Path
    total: int
    computed: int
    cached: int
    failed: list[dict]
    timings: dict
    manifest: dict

    @property
    def ok(self) -> bool:
        return not self.failed

    def summary(self) -> str:
        s = (f"{self.total} tasks: {self.computed} computed, {self.cached} from cache, {len(self.failed)} failed "
             f"in {self.timings.get('total', 0):.1f}s; ledger in {self.run_dir}")
        if self.failed:
            lines = [s, "failures:"]
            for f in self.failed[:20]:
                lines.append(f"  {f['model']} @ {f['origin']}: {f['error']}")
            if len(self.failed) > 20:
                lines.append(f"  … and {len(self.failed) - 20} more (see {self.run_dir / 'run.json'})")
            lines.append("rerun with --retry-failed to retry only these")
            return "\n".join(lines)
        return s


def _versions() -> dict:
    out = {"python": platform.python_version()}
    for name in ("numpy", "scipy", "pandas", "xarray", "pyarrow", "joblib", "properscoring", "numba"):
        try:
            out[name] = __import__(name).__version__
        except Exception:  # a missing optional package is recorded as such
            out[name] = None
    try:
        from importlib.metadata import version

        out["vintage-harness"] = version("vintage-harness")
    except Exception:
        out["vintage-harness"] = None
    return out


def run(spec: Spec, *, jobs: int | None = None, backend: str = "loky", scheduler: str | None = None,
        retry_failed: bool = False, progress: bool = True, log=None, plan: Plan | None = None) -> RunResult:
    """Run (or resume) a backtest.

    Parameters
    ----------
    spec : Spec
        From :func:`harness.spec.load_spec`.
    jobs : int, optional
        Number of parallel workers (default: all cores).
    backend : {"loky", "dask", "threading", "sequential"}
        joblib backend; ``dask`` uses a dask.distributed cluster at ``scheduler`` (an address),
        or a local cluster of ``jobs`` worker processes when no address is given.
    retry_failed : bool
        Recompute tasks whose earlier attempt failed (by default a failed key is reported again).
    progress : bool
        Show a progress bar (terminal) or log lines (elsewhere).

    Returns
    -------
    RunResult
    """
    if backend not in BACKENDS:
        raise ValueError(f"unknown backend {backend!r}; expected one of {', '.join(sorted(BACKENDS))}")
    say = log or (lambda msg: print(msg, file=sys.stderr))
    t_start = time.perf_counter()
    given_plan = plan is not None
    plan = plan or make_plan(spec)
    out = spec.out
    cache = spec.cache_dir
    out.mkdir(parents=True, exist_ok=True)
    cache.mkdir(parents=True, exist_ok=True)
    if spec.path.is_file() and spec.path.resolve() != (out / "spec.toml").resolve():
        shutil.copyfile(spec.path, out / "spec.toml")

    records: dict[str, dict] = {}
    todo = []
    for t in plan.tasks:
        base = {"model": t.model, "origin": str(t.origin), "key": t.key}
        if task_path(cache, t.key).is_file():
            records[t.key] = dict(base, status="ok", cached=True)
        elif failure_path(cache, t.key).is_file() and not retry_failed:
            old = json.loads(failure_path(cache, t.key).read_text())
            records[t.key] = dict(old, cached=True)
        else:
            todo.append(t)
    # origin-major order: slow and fast models interleave, so workers stay busy to the end
    todo.sort(key=lambda t: (t.index, t.model))
    n_cached = len(records)
    say(f"run {spec.name}: {len(plan.tasks)} tasks, {n_cached} from cache, {len(todo)} to compute "
        f"(backend {backend}, jobs {jobs or os.cpu_count()})")
    bar = Progress(len(plan.tasks), n_cached, enabled=progress)
    bar.start()
    t_run = time.perf_counter()
    if todo:
        for rec in _dispatch(plan, todo, jobs=jobs, backend=backend, scheduler=scheduler):
            rec["cached"] = False
            records[rec["key"]] = rec
            bar.update(rec["status"] == "ok")
    bar.close()
    t_assemble = time.perf_counter()
    ordered = [records[t.key] for t in plan.tasks]
    assemble(out, cache, ordered)
    failures = [{k: r.get(k) for k in ("model", "origin", "key", "error", "traceback")}
                for r in ordered if r.get("status") != "ok"]
    computed = sum(1 for r in ordered if not r.get("cached"))
    t_end = time.perf_counter()
    plan_time = sum(plan.timings.values()) if given_plan else 0.0  # else already inside t_start..t_end
    timings = dict(plan.timings, dispatch=t_assemble - t_run, assemble=t_end - t_assemble,
                   total=t_end - t_start + plan_time)
    manifest = {
        "name": spec.name,
        "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "spec": str(spec.path),
        "spec_hash": spec.hash(),
        "store": str(spec.store),
        "store_checksum": plan.store_checksum,
        "store_batches": plan.store_batches,
        "mode": spec.mode,
        "policy": spec.policy,
        "freq": spec.freq,
        "seed": spec.seed,
        "draws": spec.draws,
        "models": [m.name for m in spec.models],
        "model_specs": {m.name: {"type": m.type, "params": m.params} for m in spec.models},
        "origins": [str(o) for o in plan.origins],
        "targets": list(spec.targets),
        "horizons": list(spec.horizons),
        "target_periods": [[str(p) for p in tg.periods()] for tg in plan.targets],
        "variables": spec.variables,
        "scoring": {k: v for k, v in spec.scoring.items()},
        "backend": backend,
        "jobs": jobs or os.cpu_count(),
        "counts": {"total": len(ordered), "computed": computed, "cached": len(ordered) - computed,
                   "failed": len(failures)},
        "tasks": [{k: r.get(k) for k in ("model", "origin", "key", "status", "elapsed", "cached")} for r in ordered],
        "failures": failures,
        "timings": timings,
        "versions": _versions(),
    }
    (out / "run.json").write_text(json.dumps(manifest, indent=1, default=str) + "\n")
    return RunResult(out, len(ordered), computed, len(ordered) - computed, failures, timings, manifest)


def _dispatch(plan: Plan, todo: list[Task], *, jobs, backend, scheduler):
    """Yield task records as they complete, through joblib's configured backend."""
    from joblib import Parallel, delayed, parallel_config

    spec = plan.spec
    args = [(plan.models[t.model], plan.infos[t.index], plan.targets[t.index], spec.draws, spec.seed, t.seed_key,
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
