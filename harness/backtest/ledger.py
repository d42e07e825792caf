"""The ledger: stored forecasts of a run (draws, compact and lossless) with their provenance.

On disk, in the run directory::

    RUN/ledger-<digest>.parquet       the run's forecasts: model, origin, variable, horizon,
                                      target_period, draws, key (one row per forecast cell)
    RUN/provenance-<digest>.parquet   per task and variable: last observed period and its release date
    RUN/diagnostics-<digest>.parquet  per task: the model's diagnostics (model, origin, name, value, key)
    RUN/run.json                      the run manifest (:class:`harness.backtest.manifest.RunManifest`),
                                      which names the three files above and the draws' layout
    RUN/spec.toml                     a copy of the spec as run
    RUN/.lock                         held by the run writing this directory

The draws are stored in the ``sorted`` layout of :mod:`harness.backtest.codec` (each cell's
float32 draws sorted, delta-bit-packed: about 2.2 bytes a draw, every value exact), or in draw
order (``joint``, about 3.3 bytes a draw) when the run asks for it. Every score the harness
computes is per cell and does not depend on the order of the draws; the joint paths (draw ``d``
of every variable and horizon of one task) are kept in the task cache, which holds each task's
draws in the order the model made them (:meth:`Ledger.joint_draws`).

The files are content-addressed and written before the manifest that names them: a run killed
between the two leaves the previous manifest pointing at the previous (still present) files;
the new, unnamed files are removed by the next run or by ``vintage-harness cache clean``.
"""

from __future__ import annotations

import hashlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from harness.backtest import codec
from harness.backtest.cache import TaskCache
from harness.backtest.diagnostics import COLUMNS as DIAG_COLUMNS
from harness.errors import RunError

PROVENANCE_COLUMNS = ["model", "origin", "variable", "last_observed", "source_release", "key"]
#: the draws' layout a run writes unless asked otherwise
DEFAULT_LAYOUT = "sorted"


def _atomic_write(path: Path, data: bytes) -> None:
    from vintages import atomic_write_bytes

    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_bytes(path, data)


def ledger_digest(tasks: list[dict]) -> str:
    """Digest of the completed task keys a ledger holds (order-free)."""
    ok = sorted(t["key"] for t in tasks if t.get("status") == "ok")
    return hashlib.sha256("\n".join(ok).encode()).hexdigest()


@dataclass(frozen=True)
class LedgerFiles:
    """The files written by :func:`assemble`, and what they hold."""

    ledger: str
    provenance: str
    digest: str
    rows: int
    layout: str = DEFAULT_LAYOUT
    diagnostics: str = ""
    diagnostics_rows: int = 0

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(n for n in (self.ledger, self.provenance, self.diagnostics) if n)


def _files_of(run_dir: Path, man) -> tuple[Path, Path, Path | None]:
    diag = getattr(man, "diagnostics_file", "") or ""
    return run_dir / man.ledger, run_dir / man.provenance, (run_dir / diag if diag else None)


def _link_or_copy(src: Path, dst: Path) -> None:
    """Put a content-addressed file of another run directory here (hard link; a copy across devices)."""
    import os
    import shutil

    if dst.exists():
        return
    tmp = dst.with_name(f".tmp-link-{dst.name}")
    tmp.unlink(missing_ok=True)
    try:
        os.link(src, tmp)
    except OSError:
        shutil.copyfile(src, tmp)
    os.replace(tmp, dst)


def assemble(run_dir: Path, cache: TaskCache, tasks: list[dict], previous=None, *,
             layout: str = DEFAULT_LAYOUT, donors=()) -> LedgerFiles:
    """Gather the run's completed tasks into content-addressed ledger, provenance and diagnostics files.

    Reuses the previous run's files when they hold exactly these completed tasks in the same
    layout (a rerun with nothing new); links those of another run directory of the cache that
    holds exactly them (a new ``--out``); and otherwise takes the rows it can from the previous
    run or the donor holding most of the wanted tasks (an incremental rerun reads and encodes
    only the others). Task files are read by a thread pool (Parquet decoding releases the GIL).

    Parameters
    ----------
    run_dir : Path
    cache : TaskCache
    tasks : list of dict
        Task records (``model``, ``origin``, ``key``, ``status``).
    previous : RunManifest, optional
        The manifest of the run directory before this run.
    layout : {"sorted", "joint"}
        How the draws are stored (see :mod:`harness.backtest.codec`).
    donors : sequence of (Path, RunManifest)
        Other run directories of the same cache, best first (:meth:`TaskCache.donors`). A row
        is identified by its task key, so rows taken from another run are relabelled with this
        run's model label and origin.
    """
    if layout not in codec.LAYOUTS:
        raise ValueError(f"unknown draws layout {layout!r}; expected one of {', '.join(sorted(codec.LAYOUTS))}")
    run_dir = Path(run_dir)
    digest = ledger_digest(tasks)
    sources = ([(run_dir, previous)] if previous is not None else []) + list(donors)
    for src_dir, man in sources:
        lp, pp, dp = _files_of(src_dir, man)
        if (man.ledger_digest == digest and getattr(man, "draws_layout", "float32") == layout
                and lp.is_file() and pp.is_file() and (dp is None or dp.is_file())):
            if src_dir != run_dir:
                for f in (lp, pp, dp):
                    if f is not None:
                        _link_or_copy(f, run_dir / f.name)
            return LedgerFiles(man.ledger, man.provenance, digest, man.ledger_rows, layout,
                               man.diagnostics_file, man.diagnostics_rows)
    done = [t for t in tasks if t.get("status") == "ok" and cache.has(t["key"])]
    want = {t["key"] for t in done}
    tables, prov, diag = [], [], []
    have: set[str] = set()
    if sources:
        def overlap(source) -> int:
            return len(want.intersection(t.get("key") for t in source[1].tasks if t.get("status") == "ok"))

        best = max(sources, key=overlap)  # the first (this directory's) wins ties
        if overlap(best):
            tables, prov, diag, have = _reuse_rows(best, done, want, layout)
    todo = [t for t in done if t["key"] not in have]
    if todo:
        with ThreadPoolExecutor(max_workers=4) as pool:
            read = list(pool.map(lambda t: cache.read_task(t["key"]), todo))
        tables.append(_new_rows(todo, read, layout))
        prov_rows, diag_rows = [], []
        for t, (_, meta) in zip(todo, read, strict=True):
            for var, (lo, rd) in meta.get("provenance", {}).items():
                prov_rows.append((t["model"], t["origin"], var, lo, rd, t["key"]))
            for name, value in (meta.get("diagnostics") or {}).items():
                diag_rows.append((t["model"], t["origin"], name, float(value), t["key"]))
        prov.append(pd.DataFrame(prov_rows, columns=PROVENANCE_COLUMNS))
        diag.append(pd.DataFrame(diag_rows, columns=list(DIAG_COLUMNS)))
    if tables:
        width = {tb.schema.field("draws").type.list_size for tb in tables}
        if len(width) != 1:
            raise RunError(f"{run_dir}: tasks hold different numbers of draws {sorted(width)}")
        ledger = pa.concat_tables(tables)
    else:
        ledger = _empty_ledger(layout)
    sink = pa.BufferOutputStream()
    codec.write_table(ledger, sink, layout)
    data = sink.getvalue().to_pybytes()
    pdf = pd.concat(prov, ignore_index=True) if prov else pd.DataFrame(columns=PROVENANCE_COLUMNS)
    pdata = pdf.to_parquet(index=False)
    ddf = pd.concat(diag, ignore_index=True) if diag else pd.DataFrame(columns=list(DIAG_COLUMNS))
    ddf = ddf.astype({"value": "float64"})
    lname = f"ledger-{hashlib.sha256(data).hexdigest()[:16]}.parquet"
    pname = f"provenance-{hashlib.sha256(pdata).hexdigest()[:16]}.parquet"
    _atomic_write(run_dir / lname, data)
    _atomic_write(run_dir / pname, pdata)
    dname = ""
    if len(ddf):
        ddata = ddf.to_parquet(index=False)
        dname = f"diagnostics-{hashlib.sha256(ddata).hexdigest()[:16]}.parquet"
        _atomic_write(run_dir / dname, ddata)
    return LedgerFiles(lname, pname, digest, ledger.num_rows, layout, dname, len(ddf))


_LEDGER_COLUMNS = ["model", "origin", "variable", "horizon", "target_period", "draws", "key"]


def _reuse_rows(source, done: list[dict], want: set[str], layout: str):
    """(tables, provenance, diagnostics, keys) of the wanted tasks already in another ledger, relabelled.

    Unreadable source files give nothing to reuse (the rows are rebuilt from the task files).
    """
    src_dir, man = source
    lp, pp, dp = _files_of(src_dir, man)
    if not (lp.is_file() and pp.is_file()):
        return [], [], [], set()
    src_layout = getattr(man, "draws_layout", "float32")
    if layout != "sorted" and src_layout == "sorted":
        return [], [], [], set()  # sorted draws cannot give back the draw order: read the task files
    label = {t["key"]: t["model"] for t in done}
    origin = {t["key"]: t["origin"] for t in done}
    try:
        old = pq.read_table(lp)
        old = old.filter(pc.is_in(old.column("key"), value_set=pa.array(sorted(want), pa.string())))
        if src_layout != layout:  # e.g. a ledger written before layouts existed
            old = old.set_column(old.column_names.index("draws"), "draws",
                                 codec.encode(codec.decode(old.column("draws"), src_layout), layout))
        keys = old.column("key").to_pylist()
        old = old.set_column(old.column_names.index("model"), "model",
                             pa.array([label[k] for k in keys], pa.string()))
        old = old.set_column(old.column_names.index("origin"), "origin",
                             pa.array(np.array([origin[k] for k in keys], dtype="datetime64[D]")).cast(pa.date32()))
        have = set(keys)
        oldp = pd.read_parquet(pp)
        oldp = oldp[oldp["key"].isin(have)].copy()
        oldp["model"], oldp["origin"] = oldp["key"].map(label), oldp["key"].map(origin)
        diag = []
        if dp is not None and dp.is_file():
            oldd = pd.read_parquet(dp)
            oldd = oldd[oldd["key"].isin(have)].copy()
            oldd["model"], oldd["origin"] = oldd["key"].map(label), oldd["key"].map(origin)
            diag.append(oldd)
        return [old.select(_LEDGER_COLUMNS)], [oldp], diag, have
    except (OSError, KeyError, ValueError, pa.ArrowInvalid):
        return [], [], [], set()


def _new_rows(todo: list[dict], read: list, layout: str) -> pa.Table:
    """Ledger rows of freshly read task files, their draws encoded in ``layout`` in one pass."""
    parts, models, origins, keys = [], [], [], []
    variables, horizons, periods = [], [], []
    for t, (tab, _) in zip(todo, read, strict=True):
        n = tab.num_rows
        parts.append(codec.decode(tab.column("draws"), "joint"))
        models.append(np.full(n, t["model"], dtype=object))
        origins.append(np.full(n, np.datetime64(t["origin"], "D")))
        keys.append(np.full(n, t["key"], dtype=object))
        variables.append(tab.column("variable").to_numpy(zero_copy_only=False))
        horizons.append(tab.column("horizon").to_numpy())
        periods.append(tab.column("target_period").to_numpy(zero_copy_only=False))
    width = {p.shape[1] for p in parts}
    if len(width) != 1:
        raise RunError(f"task files hold different numbers of draws {sorted(width)}")
    return pa.table({
        "model": pa.array(np.concatenate(models), pa.string()),
        "origin": pa.array(np.concatenate(origins)).cast(pa.date32()),
        "variable": pa.array(np.concatenate(variables), pa.string()),
        "horizon": pa.array(np.concatenate(horizons).astype(np.int16)),
        "target_period": pa.array(np.concatenate(periods), pa.string()),
        "draws": codec.encode(np.concatenate(parts), layout),
        "key": pa.array(np.concatenate(keys), pa.string()),
    })


def _empty_ledger(layout: str, n_draws: int = 1) -> pa.Table:
    return pa.table({"model": pa.array([], pa.string()), "origin": pa.array([], pa.date32()),
                     "variable": pa.array([], pa.string()), "horizon": pa.array([], pa.int16()),
                     "target_period": pa.array([], pa.string()),
                     "draws": pa.array([], codec.draws_type(layout, n_draws)), "key": pa.array([], pa.string())})


def remove_stale(run_dir: Path, keep: LedgerFiles) -> None:
    """Delete ledger/provenance/diagnostics files the committed manifest no longer names (and old leftovers)."""
    run_dir = Path(run_dir)
    names = set(keep.names)
    for pattern in ("ledger-*.parquet", "provenance-*.parquet", "diagnostics-*.parquet"):
        for f in run_dir.glob(pattern):
            if f.name not in names:
                f.unlink(missing_ok=True)
    for legacy in ("ledger.parquet", "provenance.parquet", ".ledger-digest"):
        (run_dir / legacy).unlink(missing_ok=True)


@dataclass
class Ledger:
    """A run's forecasts, read back for scoring without refitting.

    Attributes
    ----------
    draws : xarray.DataArray, dims (model, origin, variable, horizon, draw), float32
        NaN where a task failed or was not run. In a ledger of the ``sorted`` layout (the
        default) each cell's draws are in ascending order, so draw ``d`` of two cells is not one
        joint path: use :meth:`joint_draws` for paths (see :attr:`draw_order`).
    target_period : xarray.DataArray, dims (origin, horizon), str
        The target period label of each origin and horizon.
    provenance : DataFrame
        Per model, origin and variable: last observed period and its release date.
    failures : DataFrame
        model, origin, key, error, traceback of each failed task.
    manifest : RunManifest
        The run manifest (``run.json``).
    run_dir : Path
    diagnostics : DataFrame
        model, origin, name, value, key: what each task's model recorded in ``diagnostics_``
        (empty when no model did).
    """

    draws: object  # xarray.DataArray
    target_period: object  # xarray.DataArray
    provenance: pd.DataFrame
    failures: pd.DataFrame
    manifest: object  # RunManifest
    run_dir: Path
    diagnostics: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=list(DIAG_COLUMNS)))

    @property
    def models(self) -> list[str]:
        return [str(m) for m in self.draws["model"].values]

    @property
    def draw_order(self) -> str:
        """``"sorted"`` (ascending within each cell) or ``"joint"`` (draw ``d`` is one path across cells)."""
        return "sorted" if getattr(self.manifest, "draws_layout", "float32") == "sorted" else "joint"

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

    def quantiles(self, levels=(0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95), *, mean: bool = True) -> pd.DataFrame:
        """The forecasts as a tidy table of quantiles: one row per forecast and level.

        Quantiles are the empirical quantiles of each cell's draws (linear interpolation
        between order statistics, numpy's default, Hyndman and Fan 1996 definition 7). Cells of
        failed or unrun tasks are left out.

        Parameters
        ----------
        levels : sequence of float in (0, 1)
        mean : bool
            Also add the draws' mean and standard deviation as the columns ``mean`` and ``sd``.

        Returns
        -------
        DataFrame
            model (str), origin (datetime64), variable (str), horizon (int64), target_period
            (str), quantile (float64), value (float64) [, mean, sd (float64)].
        """
        levels = np.asarray(list(levels), dtype=np.float64)
        if levels.size == 0 or not np.all((levels > 0) & (levels < 1)):
            raise ValueError(f"quantile levels must lie strictly between 0 and 1, got {levels.tolist()}")
        levels = np.unique(levels)
        f = self.frame()
        values = np.asarray(self.draws.values, dtype=np.float64).reshape(len(f), -1)
        ok = f["ok"].to_numpy()
        f, values = f.loc[ok].reset_index(drop=True), values[ok]
        q = np.quantile(values, levels, axis=1).T if len(f) else np.empty((0, levels.size))
        out = f.drop(columns="ok").loc[np.repeat(np.arange(len(f)), levels.size)].reset_index(drop=True)
        out["model"] = out["model"].astype(str)
        out["variable"] = out["variable"].astype(str)
        out["horizon"] = out["horizon"].astype(np.int64)
        out["target_period"] = out["target_period"].astype(str)
        out["quantile"] = np.tile(levels, len(f))
        out["value"] = q.reshape(-1)
        if mean:
            out["mean"] = np.repeat(values.mean(axis=1), levels.size) if len(f) else np.empty(0)
            out["sd"] = np.repeat(values.std(axis=1, ddof=1), levels.size) if len(f) else np.empty(0)
        return out

    def joint_draws(self, models=None, cache: str | Path | None = None):
        """The draws in the order each model made them (joint paths), from the task cache.

        Draw ``d`` of every variable and horizon of one task is then one simulated path, as the
        model returned it. A ledger stored in draw order answers from its own draws.

        Parameters
        ----------
        models : list of str, optional
            Default: every model of the ledger.
        cache : path, optional
            The task cache to read (default: the one the run used, ``manifest.cache``).

        Returns
        -------
        xarray.DataArray, dims (model, origin, variable, horizon, draw), float32

        Raises
        ------
        RunError
            A model without task results (e.g. a pool's rows), or a task result no longer in the
            cache (naming the entry; rerunning the spec recomputes the same draws).
        """
        man = self.manifest
        models = list(models) if models is not None else self.models
        if self.draw_order == "joint":
            return self.draws.sel(model=models)
        root = Path(cache) if cache is not None else Path(getattr(man, "cache", "") or "")
        if not str(root):
            raise RunError(f"{self.run_dir / 'run.json'}: names no task cache; pass cache=")
        lacking = [m for m in models if not any(t.get("model") == m for t in man.tasks)]
        if lacking:
            raise RunError(f"{self.run_dir}: models {lacking} have no task results (pools and other rows "
                           "made after the run keep no joint paths)")
        d = self.draws
        return joint_draws_from_cache(TaskCache(root), man.tasks, models, d["origin"].values,
                                      [str(v) for v in d["variable"].values], d["horizon"].values,
                                      d.sizes["draw"], spec=man.spec)


def joint_draws_from_cache(cache: TaskCache, tasks, models, origins, variables, horizons, n_draws: int, *,
                           spec: str = "SPEC"):
    """Draws in the order the models made them, from the task cache (also before a manifest exists).

    Parameters
    ----------
    cache : TaskCache
    tasks : iterable of dict
        Task records with ``model``, ``origin``, ``key`` and ``status`` (a run's records or its
        manifest's ``tasks``); failed tasks stay NaN.
    models, origins, variables, horizons : sequences
        The coordinates of the result (origins as days).
    n_draws : int

    Returns
    -------
    xarray.DataArray, dims (model, origin, variable, horizon, draw), float32
    """
    import xarray as xr

    origins_d = np.asarray(origins).astype("datetime64[D]")
    horizons = np.asarray(horizons, dtype=np.int64)
    out = np.full((len(models), len(origins_d), len(variables), len(horizons), n_draws), np.nan, dtype=np.float32)
    mi_of = {m: i for i, m in enumerate(models)}
    vidx = pd.Index(list(variables))
    for t in tasks:
        if t.get("status") != "ok" or t.get("model") not in mi_of:
            continue
        path = cache.task_path(t["key"])
        if not path.is_file():
            raise RunError(f"{path}: the joint draws of {t['model']} at {t['origin']} are no longer in the task "
                           f"cache; rerun 'vintage-harness run {spec}' (it recomputes the same draws)")
        tab, _ = cache.read_task(t["key"])
        oi = int(np.searchsorted(origins_d, np.datetime64(t["origin"], "D")))
        vi = vidx.get_indexer(tab.column("variable").to_pylist())
        hi = np.searchsorted(horizons, tab.column("horizon").to_numpy())
        out[mi_of[t["model"]], oi, vi, hi] = codec.decode(tab.column("draws"), "joint")
    return xr.DataArray(out, dims=("model", "origin", "variable", "horizon", "draw"),
                        coords={"model": list(models), "origin": origins_d.astype("datetime64[ns]"),
                                "variable": list(variables), "horizon": horizons, "draw": np.arange(n_draws)},
                        name="draws")


def _check_content_name(path: Path, manifest_path: Path) -> None:
    """A ``<kind>-<digest>.parquet`` file's bytes must hash to the digest its name (and so the
    manifest) gives: another run's ledger copied under the name is refused. Hashed once per
    process and file version (:func:`vintages.sha256_matches`; about 0.03 s per 50 MB)."""
    import re

    from vintages import sha256_matches

    m = re.fullmatch(r"[a-z]+-([0-9a-f]{16})\.parquet", path.name)
    if m is None:
        return  # an earlier format's plain name: nothing to check against
    if not sha256_matches(path, m.group(1)):
        raise RunError(f"{path}: its content does not match its name (the checksum {manifest_path} "
                       "records): the ledger and its manifest disagree; rerun 'vintage-harness run'")


def read_ledger(run_dir: str | Path) -> Ledger:
    """Read a run directory's ledger as xarray, checking that it agrees with its manifest.

    Raises
    ------
    RunError
        No run, an unknown manifest format, a missing ledger file, or a ledger holding models,
        origins, variables or horizons its manifest does not list (naming both files).
    """
    import xarray as xr

    from harness.backtest.manifest import RunManifest

    run_dir = Path(run_dir)
    manifest = RunManifest.read(run_dir)
    lpath, mpath = run_dir / manifest.ledger, run_dir / "run.json"
    if not lpath.is_file():
        raise RunError(f"{lpath}: the ledger named by {mpath} is missing; rerun 'vintage-harness run' (the task "
                       "cache is reused)")
    _check_content_name(lpath, mpath)
    try:
        t = pq.read_table(lpath)
    except (OSError, pa.ArrowInvalid) as exc:
        raise RunError(f"{lpath}: unreadable ledger ({str(exc).splitlines()[0]}); rerun 'vintage-harness run' "
                       "(the task cache is reused)") from None
    if t.num_rows != manifest.ledger_rows:
        raise RunError(f"{lpath} holds {t.num_rows} rows but {mpath} says {manifest.ledger_rows}: the "
                       "ledger and its manifest disagree; rerun 'vintage-harness run'")
    layout = manifest.draws_layout
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
                           f"{models}): the ledger and its manifest disagree; rerun 'vintage-harness run'")
        col = t.schema.field("draws").type
        if col.list_size != n_draws:
            raise RunError(f"{lpath} holds {col.list_size} draws per forecast "
                           f"but {mpath} says {n_draws}: the ledger and its manifest disagree")
        want = pa.int32() if layout == "sorted" else pa.float32()
        if col.value_type != want:
            raise RunError(f"{lpath} stores draws as {col.value_type} but {mpath} says layout {layout!r} "
                           f"({want}): the ledger and its manifest disagree; rerun 'vintage-harness run'")
        out[mi, oi, vi, hi] = codec.decode(t.column("draws"), layout)
    draws = xr.DataArray(out, dims=("model", "origin", "variable", "horizon", "draw"),
                         coords={"model": models, "origin": origins.astype("datetime64[ns]"), "variable": variables,
                                 "horizon": horizons, "draw": np.arange(n_draws)}, name="draws")
    tp = np.array(manifest.target_periods, dtype=object)
    target_period = xr.DataArray(tp, dims=("origin", "horizon"),
                                 coords={"origin": origins.astype("datetime64[ns]"), "horizon": horizons})
    ppath = run_dir / manifest.provenance
    prov = pd.read_parquet(ppath) if ppath.is_file() else pd.DataFrame(columns=PROVENANCE_COLUMNS)
    fails = pd.DataFrame(list(manifest.failures), columns=["model", "origin", "key", "error", "traceback"])
    diag = pd.DataFrame(columns=list(DIAG_COLUMNS))
    dname = getattr(manifest, "diagnostics_file", "")
    if dname:
        dpath = run_dir / dname
        if not dpath.is_file():
            raise RunError(f"{dpath}: the diagnostics named by {mpath} are missing; rerun 'vintage-harness run'")
        _check_content_name(dpath, mpath)
        diag = pd.read_parquet(dpath)
    return Ledger(draws, target_period, prov, fails, manifest, run_dir, diag)
