"""The backtest runner: tasks = model × origin, refit in parallel, seeded, cached, resumable.

Data flow: the spec names a store; the cube is built once in the driver; the information set of
every origin is built there in one vectorised pass (:func:`vintages.build_infosets`) and
shipped with its task, so workers never read the store. Both are cached by the store checksum
and the information-set settings (:func:`harness.backtest.plan.make_plan`), so a rerun with
nothing new does not rebuild them. Each task is sent through ``joblib.Parallel`` — loky locally,
or dask.distributed via joblib's dask backend — to a module-level worker that returns a small
record (status, timing, diagnostics, traceback on failure) and writes the draws to the task
cache itself, atomically. A run too small to pay for starting a pool runs inline in the driver
(:mod:`harness.backtest.dispatch`).

Determinism: every task draws from ``numpy.random.SeedSequence(spec.seed, spawn_key=(crc32(model
label), origin day))``; BLAS is limited to one thread inside a task; results are therefore the
same whatever the backend, the number of workers, inline or not, or the order of completion.

Cache: a task's key hashes the model's type, parameters, declared version and source code, the
information set's data, the targets, the number of draws and the seed key. A completed key is
never recomputed; a failed key is rerun only with ``retry_failed``. The cache is shared by every
run directory of the store (:mod:`harness.backtest.cache`): each run registers the keys it uses
before looking them up and holds the cache's shared lock while it runs, so ``vintage-harness cache
clean`` never removes what a run needs.

Crash safety: the run holds ``RUN/.lock`` (a second run on the same directory fails at once);
SIGTERM and SIGINT shut the worker pool down before the driver exits; workers whose driver died
exit by themselves; the ledger files are content-addressed and written before ``run.json``, so
a kill at any moment leaves the old manifest with its old files or the new pair.
"""

from __future__ import annotations

import os
import platform
import sys
import time
from dataclasses import dataclass
from pathlib import Path

from harness.backtest.cache import TaskCache, run_dir_lock
from harness.backtest.diagnostics import diagnostic_warnings, has_checks
from harness.backtest.dispatch import _dispatch
from harness.backtest.ledger import DEFAULT_LAYOUT, assemble, ledger_digest, remove_stale
from harness.backtest.manifest import RunManifest
from harness.backtest.plan import Plan, make_plan
from harness.backtest.process import interrupt_signals
from harness.spec import Spec
from harness.ui.progress import Progress

BACKENDS = ("dask", "loky", "sequential", "threading")


@dataclass
class RunResult:
    """What a run did: counts, timings, failures, and where the ledger is."""

    run_dir: Path
    total: int
    computed: int
    cached: int
    failed: list[dict]
    timings: dict
    manifest: RunManifest

    @property
    def ok(self) -> bool:
        return not self.failed

    @property
    def warnings(self) -> tuple[str, ...]:
        """Messages of the diagnostic checks (see :mod:`harness.backtest.diagnostics`) and one line
        per pool that used its documented fallback (the records are in ``run.json``)."""
        out = list(self.manifest.diagnostic_warnings)
        by_pool: dict[str, list[dict]] = {}
        for w in self.manifest.pool_warnings or ():
            by_pool.setdefault(str(w.get("pool", "pool")), []).append(w)
        for name, ws in by_pool.items():
            out.append(f"{name}: fallback used in {len(ws)} cell(s) (origin × variable × horizon); first: "
                       f"{ws[0].get('message', '')} (all in {self.run_dir / 'run.json'}, pool_warnings)")
        return tuple(out)

    def summary(self) -> str:
        from harness.ui.progress import run_summary

        s = run_summary(self)  # counts, with failed tasks apart from computed and cached ones
        if self.warnings:
            s += "\n" + "\n".join(f"warning: {w}" for w in self.warnings)
        if self.failed:
            lines = [s, "failures:"]
            for f in self.failed[:20]:
                lines.append(f"  {f['model']} @ {f['origin']}: {f['error']}")
            if len(self.failed) > 20:
                lines.append(f"  … and {len(self.failed) - 20} more (see {self.run_dir / 'run.json'})")
            lines.append("rerun with --retry-failed to retry only these")
            return "\n".join(lines)
        return s


def _write_pool_weights(run_dir: Path, pools) -> str:
    """Write the pools' weights as ``pools-<digest>.parquet`` (named by the manifest); '' if none."""
    if pools is None or pools.weights is None:
        return ""
    import hashlib

    from vintages import atomic_write_bytes

    data = pools.weights.to_parquet(index=False)
    name = f"pools-{hashlib.sha256(data).hexdigest()[:16]}.parquet"
    atomic_write_bytes(run_dir / name, data)
    return name


def _previous_manifest(run_dir: Path) -> RunManifest | None:
    """The run directory's manifest before this run (None if absent or of another format)."""
    from harness.errors import RunError

    try:
        return RunManifest.read(run_dir)
    except RunError:
        return None


def _versions() -> dict:
    """Versions of the packages results depend on, from their metadata (importing properscoring
    to ask would compile its kernels: 2.6 s)."""
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for name in ("numpy", "scipy", "pandas", "xarray", "pyarrow", "joblib", "properscoring", "numba",
                 "vintage-harness"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:  # a missing optional package is recorded as such
            out[name] = None
    return out


#: test hooks: ``name -> callable`` run at named points of :func:`run` (crash-safety tests kill
#: the process there); empty in normal use
CHECKPOINTS: dict = {}


def _checkpoint(name: str) -> None:
    hook = CHECKPOINTS.get(name)
    if hook is not None:
        hook()


def run(spec: Spec, *, jobs: int | None = None, backend: str = "loky", scheduler: str | None = None,
        retry_failed: bool = False, progress: bool = True, log=None, plan: Plan | None = None,
        draws_layout: str = DEFAULT_LAYOUT, inline_seconds: float | None = None) -> RunResult:
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
    plan : Plan, optional
        A plan already made for ``spec`` (``vintage-harness run`` makes it first for ``--explain``).
    draws_layout : {"sorted", "joint"}
        How the ledger stores draws (:mod:`harness.backtest.codec`): ``sorted`` (default,
        compact) or in draw order.
    inline_seconds : float, optional
        With loky: the pool start-up cost the inline pilot weighs against running the remaining
        tasks in the driver (default :data:`harness.backtest.dispatch.POOL_START_SECONDS`); 0
        always starts the pool.

    Returns
    -------
    RunResult

    Raises
    ------
    RunLockedError
        Another run is writing the same run directory.
    RunInterrupted
        SIGTERM or SIGINT arrived: the workers were shut down; finished tasks stay cached.
    """
    if backend not in BACKENDS:
        raise ValueError(f"unknown backend {backend!r}; expected one of {', '.join(sorted(BACKENDS))}")
    say = log or (lambda msg: print(msg, file=sys.stderr))
    t_start = time.perf_counter()
    out = spec.out
    cache = TaskCache(spec.cache_dir).ensure()
    out.mkdir(parents=True, exist_ok=True)
    with run_dir_lock(out), cache.using(), interrupt_signals():
        given_plan = plan is not None
        plan = plan or make_plan(spec)
        # registered before any lookup: a concurrent 'vintage-harness cache clean' keeps all of it
        cache.register(out, keys=[t.key for t in plan.tasks], **plan.cache_entries)
        _checkpoint("registered")
        return _run_locked(spec, plan, cache, given_plan=given_plan, t_start=t_start, jobs=jobs,
                           backend=backend, scheduler=scheduler, retry_failed=retry_failed,
                           progress=progress, say=say, draws_layout=draws_layout,
                           inline_seconds=inline_seconds)


def _run_locked(spec: Spec, plan: Plan, cache: TaskCache, *, given_plan: bool, t_start: float, jobs,
                backend: str, scheduler, retry_failed: bool, progress: bool, say, draws_layout: str,
                inline_seconds) -> RunResult:
    """The body of :func:`run`, once the run directory and the cache are locked."""
    out = spec.out
    if spec.path.is_file() and spec.path.resolve() != (out / "spec.toml").resolve():
        from vintages import atomic_write_bytes

        data = spec.path.read_bytes()
        if not (out / "spec.toml").is_file() or (out / "spec.toml").read_bytes() != data:
            atomic_write_bytes(out / "spec.toml", data)
    previous = _previous_manifest(out)

    records: dict[str, dict] = {}
    todo = []
    for t in plan.tasks:
        base = {"model": t.model, "origin": str(t.origin), "key": t.key}
        if cache.has(t.key):
            records[t.key] = dict(base, status="ok", cached=True)
        elif cache.failure_path(t.key).is_file() and not retry_failed:
            try:
                records[t.key] = dict(cache.read_failure(t.key), cached=True)
            except (OSError, ValueError):  # a damaged failure record: compute the task again
                todo.append(t)
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
    try:
        if todo:
            for rec in _dispatch(plan, todo, jobs=jobs, backend=backend, scheduler=scheduler,
                                 cache=str(cache.root), inline_seconds=inline_seconds):
                rec["cached"] = False
                records[rec["key"]] = rec
                bar.update(rec["status"] == "ok")
    finally:
        bar.close()
    # -- pools: combinations of the models' draws, after their members (harness.backtest.pooling)
    pools = None
    if spec.pools:
        from harness.backtest.pooling import compute_pools

        pools = compute_pools(plan, cache, records)
        # the pools' tasks and weights are this run's entries too ('cache clean' keeps them)
        cache.register(out, keys=[t.key for t in plan.tasks] + [r["key"] for r in pools.records],
                       pools=pools.pool_keys, **plan.cache_entries)
    t_assemble = time.perf_counter()
    ordered = [records[t.key] for t in plan.tasks] + (pools.records if pools else [])
    donors = [] if previous is not None and previous.ledger_digest == ledger_digest(ordered) else \
        cache.donors(out, [r["key"] for r in ordered if r.get("status") == "ok"])
    files = assemble(out, cache, ordered, previous, layout=draws_layout, donors=donors)
    pool_file = _write_pool_weights(out, pools)
    _checkpoint("after_ledger")
    failures = [{k: r.get(k) for k in ("model", "origin", "key", "error", "traceback")}
                for r in ordered if r.get("status") != "ok"]
    computed = sum(1 for r in ordered if not r.get("cached"))
    warnings = tuple(_warnings(out, files))
    t_end = time.perf_counter()
    plan_time = sum(plan.timings.values()) if given_plan else 0.0  # else already inside t_start..t_end
    timings = dict(plan.timings, dispatch=t_assemble - t_run, assemble=t_end - t_assemble,
                   total=t_end - t_start + plan_time)
    manifest = RunManifest(
        name=spec.name,
        created=time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        spec=str(spec.path),
        spec_hash=spec.hash(),
        store=str(spec.store),
        store_checksum=plan.store_checksum,
        store_batches=plan.store_batches,
        mode=spec.mode,
        policy=spec.policy,
        freq=spec.freq,
        seed=spec.seed,
        draws=spec.draws,
        models=spec.labels,
        model_specs={**{m.name: {"type": m.type, "params": m.params} for m in spec.models},
                     **{p.name: {"type": f"pool:{p.scheme}",
                                 "params": {"members": list(p.members), "window": p.window,
                                            "min_scored": p.min_scored, "score": p.score,
                                            "truth": p.truth}} for p in spec.pools}},
        origins=tuple(str(o) for o in plan.origins),
        targets=tuple(spec.targets.variables),
        horizons=tuple(spec.targets.horizons),
        target_periods=tuple(tuple(str(p) for p in tg.periods()) for tg in plan.targets),
        variables=spec.series(),
        scoring=spec.scoring,
        backend=backend,
        jobs=jobs or os.cpu_count(),
        counts={"total": len(ordered), "computed": computed, "cached": len(ordered) - computed,
                "failed": len(failures)},
        tasks=tuple({k: r.get(k) for k in ("model", "origin", "key", "status", "elapsed", "cached")}
                    for r in ordered),
        failures=tuple(failures),
        timings=timings,
        versions=_versions(),
        ledger=files.ledger,
        provenance=files.provenance,
        ledger_digest=files.digest,
        ledger_rows=files.rows,
        pools=pool_file,
        pool_warnings=tuple(pools.warnings) if pools else (),
        draws_layout=files.layout,
        diagnostics_file=files.diagnostics,
        diagnostics_rows=files.diagnostics_rows,
        diagnostic_warnings=warnings,
        cache=str(cache.root.resolve()),
    )
    manifest.write(out)
    _checkpoint("after_manifest")
    remove_stale(out, files)
    for f in out.glob("pools-*.parquet"):  # weights files of earlier runs
        if f.name != pool_file:
            f.unlink(missing_ok=True)
    return RunResult(out, len(ordered), computed, len(ordered) - computed, failures, timings, manifest)


def _warnings(run_dir: Path, files) -> list[str]:
    """The diagnostic checks' messages on the run's diagnostics table (none without a table)."""
    if not has_checks():
        return []
    import pandas as pd

    from harness.backtest.diagnostics import COLUMNS

    table = (pd.read_parquet(Path(run_dir) / files.diagnostics) if files.diagnostics
             else pd.DataFrame(columns=list(COLUMNS)))
    return diagnostic_warnings(table)
