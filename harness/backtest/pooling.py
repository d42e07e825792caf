"""Pools in the run: combinations computed after their members, cached like tasks, stored as draws.

After the models' tasks, each ``[pools.NAME]`` of the spec is computed from its members' draws
(read from the task cache) with weights that, at each origin, use only truths published by then
(:mod:`harness.pools`). The pool's draws are written per origin in the task format under keys of
their own, so the ledger gathers them like any model's and they are scored, tested and reported
the same way. A pool's key hashes its settings, its members' task keys and the truths it learns
from: when nothing changed, a rerun reads the pool from the cache.
"""

from __future__ import annotations

import hashlib
import json
import time
import zlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd


@dataclass
class PoolOutcome:
    """What computing the pools produced: task records, the weights table and warnings."""

    records: list[dict] = field(default_factory=list)
    weights: pd.DataFrame | None = None
    warnings: list[dict] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    #: each pool's key (its weights and meta files in the cache's ``pools/``)
    pool_keys: list[str] = field(default_factory=list)


def _member_draws(plan, cache, members: list[str]) -> np.ndarray:
    """(M, O, V, H, D) draws of the members from their task files in the cache (NaN where a task failed)."""
    spec = plan.spec
    o, v, h = len(plan.origins), len(spec.targets.variables), len(spec.targets.horizons)
    out = np.full((len(members), o, v, h, spec.draws), np.nan, dtype=np.float32)
    by = {(t.model, t.index): t for t in plan.tasks}
    for mi, m in enumerate(members):
        for i in range(o):
            t = by[(m, i)]
            if not cache.has(t.key):
                continue
            tab, _ = cache.read_task(t.key)
            vals = tab.column("draws").combine_chunks().flatten().to_numpy().reshape(tab.num_rows, -1)
            out[mi, i] = vals.reshape(v, h, -1)
    return out


def _truth_table(plan, rule: str) -> pd.DataFrame:
    from vintages import truth_values

    spec = plan.spec
    rows = []
    for var in spec.targets.variables:
        periods = sorted({str(p) for tg in plan.targets for p in tg.periods()},
                         key=lambda s: pd.Period(s, freq=spec.freq))
        vals, rel, _ = truth_values(plan.cube, rule, var, spec.variables[var],
                                    pd.PeriodIndex(periods, freq=spec.freq), freq=spec.freq)
        rows.append(pd.DataFrame({"variable": var, "target_period": periods, "truth": vals,
                                  "truth_release": pd.to_datetime(np.asarray(rel))}))
    return pd.concat(rows, ignore_index=True)


def _settings(spec, pool, version: int) -> bytes:
    """What a pool's key hashes of its settings and the run's (seed, draws)."""
    return json.dumps({"pool": pool.name, "scheme": pool.scheme, "members": list(pool.members),
                       "window": pool.window, "min_scored": pool.min_scored, "score": pool.score,
                       "truth": pool.truth, "seed": spec.seed, "draws": spec.draws,
                       "version": version}, sort_keys=True).encode()


def _pool_key(spec, pool, member_keys: list[str], truths: pd.DataFrame) -> str:
    h = hashlib.sha256(_settings(spec, pool, 1))
    h.update("\n".join(member_keys).encode())
    h.update(pd.util.hash_pandas_object(truths, index=False).to_numpy().tobytes())
    return h.hexdigest()[:32]


def _origin_keys(spec, pool, plan, cache, members: list[str], truths: pd.DataFrame) -> list[str]:
    """One key per origin: the pool's settings, its members' task keys at this and earlier
    origins (with whether each succeeded: a retried member changes the pool), and the truths
    published on or before it.

    That is everything the pool's draws at an origin depend on (its weights use only forecasts
    scored by truths published by then, its draws the members' draws there and a generator of
    the origin's own; :mod:`harness.pools`), so a change at a later origin, or a truth published
    later, leaves the earlier origins' pool tasks cached.
    """
    h = hashlib.sha256(_settings(spec, pool, 2))
    by = {(t.model, t.index): t.key for t in plan.tasks}
    rel = pd.to_datetime(truths["truth_release"]).to_numpy(dtype="datetime64[D]")
    known = truths.assign(_rel=rel)[~np.isnat(rel)].sort_values(["_rel", "variable", "target_period"])
    known_rel = known["_rel"].to_numpy()
    text = [f"{v}|{p}|{x!r}|{r}" for v, p, x, r in zip(known["variable"], known["target_period"],
                                                     known["truth"], known_rel, strict=True)]
    keys, j = [], 0
    for i, o in enumerate(np.asarray(plan.origins, dtype="datetime64[D]")):
        for m in members:
            k = by.get((m, i))
            h.update(f"{k}:{'ok' if k is not None and cache.has(k) else 'none'}\n".encode())
        while j < len(text) and known_rel[j] <= o:
            h.update(text[j].encode() + b"\n")
            j += 1
        keys.append(h.copy().hexdigest()[:32])
    return keys


def pool_seed(seed: int, name: str) -> int:
    """The pool's seed, spawned from the run's seed and the pool's name."""
    ss = np.random.SeedSequence(int(seed), spawn_key=(zlib.crc32(b"pool"), zlib.crc32(name.encode())))
    return int(ss.generate_state(1)[0])


def compute_pools(plan, cache, records: dict[str, dict]) -> PoolOutcome:
    """Compute (or read from the cache) every pool of the spec; return task records per origin.

    Parameters
    ----------
    plan : Plan
        With ``plan.cube`` (the store's release index) and the models' tasks.
    cache : TaskCache
        The task cache (:class:`harness.backtest.cache.TaskCache`).
    records : dict
        The models' task records by key (status of each member task).

    Returns
    -------
    PoolOutcome
        One task record per pool and origin (``model`` = the pool's name), the weights of every
        pool in one tidy table, and the fallbacks and warnings the pools reported.
    """
    from harness.pools import combine

    spec = plan.spec
    out = PoolOutcome()
    frames = []
    for pool in spec.pools:
        t0 = time.perf_counter()
        members = list(pool.members)
        mkeys = [t.key for m in members for t in plan.tasks if t.model == m]
        truths = _truth_table(plan, pool.truth)
        pkey = _pool_key(spec, pool, mkeys, truths)
        okeys = _origin_keys(spec, pool, plan, cache, members, truths)
        was_cached = [cache.has(k) for k in okeys]
        out.pool_keys.append(pkey)
        weights_path = cache.root / "pools" / f"{pkey}.parquet"
        meta_path = cache.root / "pools" / f"{pkey}.json"
        cached = weights_path.is_file() and meta_path.is_file() and all(cache.has(k) for k in okeys)
        if not cached:
            from harness.pools import truth_grid

            draws = _member_draws(plan, cache, members)
            tp = _target_period_grid(plan)
            truth, known = truth_grid(tp, list(spec.targets.variables), truths, pool.truth, spec.freq)
            kw = {"score": pool.score or "crps"} if pool.scheme == "inverse_score" else {}
            if pool.scheme != "equal":
                kw.update(window=pool.window, min_scored=pool.min_scored)
            res = combine(draws, plan.origins.astype("datetime64[D]"), truth, known, scheme=pool.scheme,
                          seed=pool_seed(spec.seed, pool.name), **kw,
                          models=members, variables=list(spec.targets.variables),
                          horizons=list(spec.targets.horizons), warn=False)
            for i, (o, k) in enumerate(zip(plan.origins, okeys, strict=True)):
                import xarray as xr

                if was_cached[i]:
                    continue  # the same inputs up to this origin: the cached draws are these draws
                da = xr.DataArray(np.moveaxis(res.draws[i], -1, 0).astype(np.float64),
                                  dims=("draw", "variable", "horizon"),
                                  coords={"draw": np.arange(spec.draws),
                                          "variable": list(spec.targets.variables),
                                          "horizon": list(spec.targets.horizons)})
                if not np.isfinite(da.values).all():
                    continue  # no member has a forecast here: the pool has none either
                cache.write_task(k, da, [str(p) for p in plan.targets[i].periods()],
                           {"model": pool.name, "origin": str(o), "key": k, "pool": pool.name,
                            "scheme": pool.scheme, "provenance": {}})
            w = _weights_table(pool.name, res, plan, members)
            from vintages import atomic_write_bytes

            weights_path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_bytes(weights_path, w.to_parquet(index=False))
            warns = [dict(r, pool=pool.name) for r in res.warnings]
            atomic_write_bytes(meta_path,
                               (json.dumps({"warnings": warns, "params": res.params}, default=str) + "\n").encode())
        w = pd.read_parquet(weights_path)
        meta = json.loads(meta_path.read_text())
        out.warnings.extend(meta.get("warnings", []))
        frames.append(w)
        for o, k, hit in zip(plan.origins, okeys, was_cached, strict=True):
            ok = cache.has(k)
            out.records.append({"model": pool.name, "origin": str(o), "key": k, "cached": cached or hit,
                                "status": "ok" if ok else "failed", "elapsed": 0.0,
                                **({} if ok else {"error": "no member has a forecast at this origin"})})
        out.timings[pool.name] = time.perf_counter() - t0
    out.weights = pd.concat(frames, ignore_index=True) if frames else None
    return out


def _target_period_grid(plan):
    import xarray as xr

    tp = np.array([[str(p) for p in tg.periods()] for tg in plan.targets], dtype=object)
    return xr.DataArray(tp, dims=("origin", "horizon"),
                        coords={"origin": plan.origins.astype("datetime64[ns]"),
                                "horizon": list(plan.spec.targets.horizons)})


def _weights_table(name: str, res, plan, members: list[str]) -> pd.DataFrame:
    o, v, h, m = res.weights.shape
    idx = pd.MultiIndex.from_product([pd.to_datetime(plan.origins.astype("datetime64[D]")),
                                      list(plan.spec.targets.variables), list(plan.spec.targets.horizons),
                                      members], names=["origin", "variable", "horizon", "model"])
    df = idx.to_frame(index=False)
    df.insert(0, "pool", name)
    df["weight"] = res.weights.reshape(-1)
    rep = m
    df["fallback"] = np.repeat(res.fallback.reshape(-1), rep)
    df["n_scored"] = np.repeat(res.n_scored.reshape(-1), rep)
    df["gap"] = np.repeat(res.gap.reshape(-1), rep)
    return df
