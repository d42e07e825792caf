"""The ledger: stored forecasts of a run (draws as float32) with their provenance.

On disk, below the run directory::

    RUN/tasks/<key>.parquet      one completed task: rows (variable, horizon, target_period, draws)
    RUN/tasks/<key>.fail.json    one failed task: its traceback
    RUN/ledger-<digest>.parquet      the run's forecasts: model, origin, variable, horizon, target_period, draws
    RUN/provenance-<digest>.parquet  per task and variable: last observed period and its release date
    RUN/run.json                     the run manifest (:class:`harness.backtest.manifest.RunManifest`),
                                     which names the two files above
    RUN/spec.toml                    a copy of the spec as run

Task files are written atomically (temporary name, fsync, rename), so a run killed at any point
keeps every task that finished, and a rerun picks up from there. The ledger and provenance files
are content-addressed and written before the manifest that names them: a kill between the two
leaves the previous manifest pointing at the previous (still present) files.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute  # noqa: F401  (pa.compute)
import pyarrow.parquet as pq
import xarray as xr

from harness.errors import RunError
from vintages import atomic_write_bytes


def _atomic_write(path: Path, data: bytes) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_bytes(path, data)


def task_path(cache_dir: Path, key: str) -> Path:
    return Path(cache_dir) / f"{key}.parquet"


def failure_path(cache_dir: Path, key: str) -> Path:
    return Path(cache_dir) / f"{key}.fail.json"


def write_task(cache_dir: Path, key: str, draws: xr.DataArray, target_periods: list[str], meta: dict) -> Path:
    """Persist one task's draws (dims draw, variable, horizon) atomically; ``meta`` goes in the file's metadata."""
    arr = np.asarray(draws.transpose("variable", "horizon", "draw").values, dtype=np.float32)
    nv, nh, nd = arr.shape
    variables = [str(v) for v in draws["variable"].values]
    horizons = [int(h) for h in draws["horizon"].values]
    flat = pa.array(arr.reshape(-1), type=pa.float32())
    table = pa.table({
        "variable": pa.array(np.repeat(variables, nh)),
        "horizon": pa.array(np.tile(np.asarray(horizons, dtype=np.int16), nv)),
        "target_period": pa.array(np.tile(np.asarray(target_periods, dtype=object), nv).astype(str)),
        "draws": pa.FixedSizeListArray.from_arrays(flat, nd),
    })
    table = table.replace_schema_metadata({"task": json.dumps(meta, default=str)})
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd")
    path = task_path(cache_dir, key)
    _atomic_write(path, sink.getvalue().to_pybytes())
    return path


def write_failure(cache_dir: Path, key: str, record: dict) -> Path:
    path = failure_path(cache_dir, key)
    _atomic_write(path, (json.dumps(record, indent=1, default=str) + "\n").encode())
    return path


def read_task(cache_dir: Path, key: str) -> tuple[pa.Table, dict]:
    t = pq.read_table(task_path(cache_dir, key))
    return t, json.loads(t.schema.metadata[b"task"])


def ledger_digest(tasks: list[dict]) -> str:
    """Digest of the completed task keys a ledger holds (order-free)."""
    import hashlib

    ok = sorted(t["key"] for t in tasks if t.get("status") == "ok")
    return hashlib.sha256("\n".join(ok).encode()).hexdigest()


@dataclass(frozen=True)
class LedgerFiles:
    """The ledger and provenance file names written by :func:`assemble`, and what they hold."""

    ledger: str
    provenance: str
    digest: str
    rows: int


def assemble(run_dir: Path, cache_dir: Path, tasks: list[dict], previous=None) -> LedgerFiles:
    """Gather the run's completed task files into content-addressed ledger and provenance files.

    Reuses the previous run's files when they hold exactly these completed tasks (a fully cached
    rerun) and their rows otherwise (an incremental rerun reads only its new task files). Task
    files are read by a thread pool (Parquet decoding releases the GIL).

    Parameters
    ----------
    run_dir, cache_dir : Path
    tasks : list of dict
        Task records (``model``, ``origin``, ``key``, ``status``).
    previous : RunManifest, optional
        The manifest of the run directory before this run.
    """
    from concurrent.futures import ThreadPoolExecutor

    run_dir = Path(run_dir)
    digest = ledger_digest(tasks)
    old_lp = run_dir / previous.ledger if previous is not None else None
    old_pp = run_dir / previous.provenance if previous is not None else None
    if (previous is not None and previous.ledger_digest == digest and old_lp.is_file()
            and old_pp.is_file()):
        return LedgerFiles(previous.ledger, previous.provenance, digest, previous.ledger_rows)
    done = [t for t in tasks if t.get("status") == "ok" and task_path(cache_dir, t["key"]).is_file()]
    want = {t["key"] for t in done}
    tables, prov = [], []
    have: set[str] = set()
    if old_lp is not None and old_lp.is_file() and old_pp.is_file():
        try:
            old = pq.read_table(old_lp)
            oldp = pd.read_parquet(old_pp)
            keep = pa.compute.is_in(old.column("key"), value_set=pa.array(sorted(want)))
            old = old.filter(keep)
            have = set(old.column("key").unique().to_pylist())
            tables.append(old)
            prov.extend(oldp[oldp["key"].isin(have)].to_dict("records"))
        except (OSError, KeyError, pa.ArrowInvalid):  # unreadable: rebuilt from the task files
            tables, prov, have = [], [], set()
    todo = [t for t in done if t["key"] not in have]
    with ThreadPoolExecutor(max_workers=4) as pool:
        read = list(pool.map(lambda t: read_task(cache_dir, t["key"]), todo))
    for t, (tab, meta) in zip(todo, read, strict=True):
        n = tab.num_rows
        tab = tab.replace_schema_metadata(None)
        tab = tab.add_column(0, "model", pa.array([t["model"]] * n))
        tab = tab.add_column(1, "origin", pa.array(np.full(n, np.datetime64(t["origin"], "D"))).cast(pa.date32()))
        tab = tab.append_column("key", pa.array([t["key"]] * n))
        tables.append(tab)
        for var, (lo, rd) in meta.get("provenance", {}).items():
            prov.append({"model": t["model"], "origin": t["origin"], "variable": var, "last_observed": lo,
                         "source_release": rd, "key": t["key"]})
    if tables:
        width = {tb.schema.field("draws").type.list_size for tb in tables}
        if len(width) != 1:
            raise RunError(f"{run_dir}: tasks hold different numbers of draws {sorted(width)}")
        ledger = pa.concat_tables(tables)
    else:
        ledger = pa.table({"model": pa.array([], pa.string()), "origin": pa.array([], pa.date32()),
                           "variable": pa.array([], pa.string()), "horizon": pa.array([], pa.int16()),
                           "target_period": pa.array([], pa.string()),
                           "draws": pa.array([], pa.list_(pa.float32(), 1)), "key": pa.array([], pa.string())})
    sink = pa.BufferOutputStream()
    # float draws barely compress; lz4 writes fastest at about the same size as zstd
    pq.write_table(ledger, sink, compression="lz4")
    data = sink.getvalue().to_pybytes()
    pdf = pd.DataFrame(prov, columns=["model", "origin", "variable", "last_observed", "source_release", "key"])
    pdata = pdf.to_parquet(index=False)
    import hashlib

    lname = f"ledger-{hashlib.sha256(data).hexdigest()[:16]}.parquet"
    pname = f"provenance-{hashlib.sha256(pdata).hexdigest()[:16]}.parquet"
    _atomic_write(run_dir / lname, data)
    _atomic_write(run_dir / pname, pdata)
    return LedgerFiles(lname, pname, digest, ledger.num_rows)


def remove_stale(run_dir: Path, keep: LedgerFiles) -> None:
    """Delete ledger/provenance files (and first-wave leftovers) the committed manifest no longer names."""
    run_dir = Path(run_dir)
    for pattern in ("ledger-*.parquet", "provenance-*.parquet"):
        for f in run_dir.glob(pattern):
            if f.name not in (keep.ledger, keep.provenance):
                f.unlink(missing_ok=True)
    for legacy in ("ledger.parquet", "provenance.parquet", ".ledger-digest"):
        (run_dir / legacy).unlink(missing_ok=True)


@dataclass
class Ledger:
    """A run's forecasts, read back for scoring without refitting.

    Attributes
    ----------
    draws : xarray.DataArray, dims (model, origin, variable, horizon, draw), float32
        NaN where a task failed or was not run.
    target_period : xarray.DataArray, dims (origin, horizon), str
        The target period label of each origin and horizon.
    provenance : DataFrame
        Per model, origin and variable: last observed period and its release date.
    failures : DataFrame
        model, origin, key, error, traceback of each failed task.
    manifest : RunManifest
        The run manifest (``run.json``).
    run_dir : Path
    """

    draws: xr.DataArray
    target_period: xr.DataArray
    provenance: pd.DataFrame
    failures: pd.DataFrame
    manifest: object  # RunManifest
    run_dir: Path

    @property
    def models(self) -> list[str]:
        return [str(m) for m in self.draws["model"].values]

    def frame(self) -> pd.DataFrame:
        """One row per forecast (model, origin, variable, horizon, target_period) with an ``ok`` flag."""
        d = self.draws
        idx = pd.MultiIndex.from_product([d["model"].values, d["origin"].values, d["variable"].values,
                                          d["horizon"].values], names=["model", "origin", "variable", "horizon"])
        f = idx.to_frame(index=False)
        tp = self.target_period.sel(origin=f["origin"].to_xarray(), horizon=f["horizon"].to_xarray())
        f["target_period"] = np.asarray(tp.values)
        f["ok"] = ~np.isnan(d.values[..., 0]).reshape(-1)
        return f


def read_ledger(run_dir: str | Path) -> Ledger:
    """Read a run directory's ledger as xarray, checking that it agrees with its manifest.

    Raises
    ------
    RunError
        No run, an unknown manifest format, a missing ledger file, or a ledger holding models,
        origins, variables or horizons its manifest does not list (naming both files).
    """
    from harness.backtest.manifest import RunManifest

    run_dir = Path(run_dir)
    manifest = RunManifest.read(run_dir)
    lpath, mpath = run_dir / manifest.ledger, run_dir / "run.json"
    if not lpath.is_file():
        raise RunError(f"{lpath}: the ledger named by {mpath} is missing; rerun 'harness run' (the task "
                       "cache is reused)")
    t = pq.read_table(lpath)
    if t.num_rows != manifest.ledger_rows:
        raise RunError(f"{lpath} holds {t.num_rows} rows but {mpath} says {manifest.ledger_rows}: the "
                       "ledger and its manifest disagree; rerun 'harness run'")
    models = list(manifest.models)
    origins = np.array(manifest.origins, dtype="datetime64[D]")
    variables = list(manifest.targets)
    horizons = np.array(manifest.horizons, dtype=np.int64)
    n_draws = int(manifest.draws)
    out = np.full((len(models), len(origins), len(variables), len(horizons), n_draws), np.nan, dtype=np.float32)
    if t.num_rows:
        df = t.select(["model", "origin", "variable", "horizon"]).to_pandas()
        mi = pd.Index(models).get_indexer(df["model"])
        od = df["origin"].to_numpy().astype("datetime64[D]")
        oi = np.searchsorted(origins, od)
        vi = pd.Index(variables).get_indexer(df["variable"])
        hh = df["horizon"].to_numpy()
        hi = np.searchsorted(horizons, hh)
        ok_o = (oi < len(origins)) & (origins[np.minimum(oi, len(origins) - 1)] == od)
        ok_h = (hi < len(horizons)) & (horizons[np.minimum(hi, len(horizons) - 1)] == hh)
        bad = (mi < 0) | (vi < 0) | ~ok_o | ~ok_h
        if bad.any():
            r = df[bad].iloc[0]
            raise RunError(f"{lpath} holds a forecast of model {r['model']!r} at origin {r['origin']} "
                           f"({r['variable']}, h={r['horizon']}) that {mpath} does not list (models "
                           f"{models}): the ledger and its manifest disagree; rerun 'harness run'")
        if t.schema.field("draws").type.list_size != n_draws:
            raise RunError(f"{lpath} holds {t.schema.field('draws').type.list_size} draws per forecast "
                           f"but {mpath} says {n_draws}: the ledger and its manifest disagree")
        vals = t.column("draws").combine_chunks().flatten().to_numpy().reshape(t.num_rows, -1)
        out[mi, oi, vi, hi] = vals
    draws = xr.DataArray(out, dims=("model", "origin", "variable", "horizon", "draw"),
                         coords={"model": models, "origin": origins.astype("datetime64[ns]"), "variable": variables,
                                 "horizon": horizons, "draw": np.arange(n_draws)}, name="draws")
    tp = np.array(manifest.target_periods, dtype=object)
    target_period = xr.DataArray(tp, dims=("origin", "horizon"),
                                 coords={"origin": origins.astype("datetime64[ns]"), "horizon": horizons})
    ppath = run_dir / manifest.provenance
    prov = pd.read_parquet(ppath) if ppath.is_file() else pd.DataFrame()
    fails = pd.DataFrame(list(manifest.failures), columns=["model", "origin", "key", "error", "traceback"])
    return Ledger(draws, target_period, prov, fails, manifest, run_dir)
