"""The on-disk vintage store: an append-only Parquet release log plus a JSON manifest.

Layout of a store directory::

    STORE/manifest.json              format, variables' metadata, the list of batches with checksums, audit
    STORE/log/NNNNNN-<sha>.parquet   one file per accepted batch (variable, period, release, value, batch)
    STORE/.lock                      advisory lock (``flock``) held by the single writer; created by init

Laws (tested):

* Appending a release never changes what was known at any earlier date unless ``supersede`` is
  given, and even then the superseded value stays in the log with an audit record.
* A crash at any moment leaves the store equal to the state before or after the batch: the batch
  file is written to a temporary name, fsynced and renamed, and the manifest is replaced last
  (the same way). Files in ``log/`` that the manifest does not list, and temporary files, are
  left by an interrupted append: readers ignore them and :meth:`VintageStore.verify` does not
  report them (:meth:`VintageStore.orphans` lists them).
* Readers never take the lock; they read the manifest once and then only the files it lists,
  which are never rewritten, so a reader sees one committed state even while a writer works.
"""

from __future__ import annotations

import datetime as _dt
import fcntl
import hashlib
import json
import os
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from vintages.errors import (
    InputError,
    ReleaseConflictError,
    StoreCorruptError,
    StoreLockedError,
    StoreNotFoundError,
)
from vintages.periods import format_periods, parse_periods

FORMAT = "vintage-store/1"
LOG_COLUMNS = ("variable", "period", "release", "value", "batch")
_SCHEMA = pa.schema(
    [
        ("variable", pa.string()),
        ("period", pa.string()),
        ("release", pa.date32()),
        ("value", pa.float64()),
        ("batch", pa.int32()),
    ]
)
_KEY = ["variable", "period", "release"]
_TMP_PREFIX = ".tmp-"


@dataclass(frozen=True)
class AppendResult:
    """What an append did: rows written, rows already present, rows superseded, batch file."""

    written: int
    unchanged: int
    superseded: int
    batch_file: str | None

    def summary(self) -> str:
        """One line for people: what was written where."""
        if self.batch_file is None:
            return f"nothing new: all {self.unchanged} values already in the store"
        extra = f", {self.superseded} superseded (audit kept)" if self.superseded else ""
        return f"{self.written} values written to {self.batch_file} ({self.unchanged} already present{extra})"


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write to a temporary file in the same directory, fsync, rename over ``path``, fsync the dir."""
    fd, tmp = tempfile.mkstemp(prefix=_TMP_PREFIX, dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    _fsync_dir(path.parent)  # the rename itself must reach the disk before we go on


def sha256_file(path: Path) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


class VintageStore:
    """An append-only store of every release of every variable.

    Parameters
    ----------
    path : path-like
        The store directory, created by :meth:`init`.

    Raises
    ------
    StoreNotFoundError
        When ``path`` holds no ``manifest.json``.

    Examples
    --------
    >>> store = VintageStore.init(tmp_path / "store")          # doctest: +SKIP
    >>> store.append(releases, variables={"gdp": {"freq": "Q"}})  # doctest: +SKIP
    >>> store.cube().asof("2020-05-15")                        # doctest: +SKIP
    """

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        if not (self.path / "manifest.json").is_file():
            raise StoreNotFoundError(f"{self.path}: not a vintage store (no manifest.json); "
                                     f"create one with 'harness vintages init {self.path}'")

    def __repr__(self) -> str:
        return f"VintageStore({str(self.path)!r})"

    # ----------------------------------------------------------------- creation and reading
    @classmethod
    def init(cls, path: str | os.PathLike, *, exist_ok: bool = False) -> VintageStore:
        """Create an empty store at ``path`` (the directory may exist but must be empty).

        Raises
        ------
        FileExistsError
            When a store already exists there (and not ``exist_ok``), or the path is a
            non-empty directory or a file.
        """
        p = Path(path)
        if (p / "manifest.json").exists():
            if exist_ok:
                return cls(p)
            raise FileExistsError(f"{p}: a vintage store already exists here")
        if p.exists() and not p.is_dir():
            raise FileExistsError(f"{p}: is a file, not a directory; choose a new path for the store")
        if p.exists() and any(p.iterdir()):
            raise FileExistsError(f"{p}: directory is not empty; choose a new path for the store")
        (p / "log").mkdir(parents=True, exist_ok=True)
        # The lock file exists from the start, so a writer never adds a file to the store
        # merely by trying (a refused append leaves every file byte-identical).
        (p / ".lock").touch()
        manifest = {"format": FORMAT, "created": _now(), "variables": {}, "batches": [], "audit": []}
        atomic_write_bytes(p / "manifest.json", _dump(manifest))
        return cls(p)

    def manifest(self) -> dict:
        """The manifest as last committed (a fresh read: readers see a consistent snapshot).

        Raises
        ------
        StoreCorruptError
            When the manifest cannot be read or has another format.
        """
        f = self.path / "manifest.json"
        try:
            m = json.loads(f.read_text())
        except (OSError, json.JSONDecodeError) as exc:
            raise StoreCorruptError(f"{f}: unreadable manifest: {exc}") from exc
        if not isinstance(m, dict) or m.get("format") != FORMAT:
            got = m.get("format") if isinstance(m, dict) else type(m).__name__
            raise StoreCorruptError(f"{f}: format {got!r}, expected {FORMAT!r}")
        return m

    @property
    def variables(self) -> dict[str, dict]:
        """Per-variable metadata: ``{name: {"freq", "units", "description"}}``."""
        return self.manifest()["variables"]

    def checksum(self) -> str:
        """A digest of the committed state (the batch checksums in order and the metadata)."""
        return _checksum(self.manifest())

    def verify(self) -> list[str]:
        """Check every listed file against its checksum; return a list of problems (empty = sound).

        Files in ``log/`` that the manifest does not list (left by an interrupted append) are not
        problems: they were never committed (see :meth:`orphans`).
        """
        problems = []
        seen: set[str] = set()
        for k, b in enumerate(self.manifest()["batches"], start=1):
            rel = str(b.get("file", ""))
            if b.get("seq") != k:
                problems.append(f"{rel}: batch number {b.get('seq')!r}, expected {k}")
            if not _is_log_name(rel):
                problems.append(f"{rel!r}: not a file name under log/")
                continue
            if rel in seen:
                problems.append(f"{rel}: listed twice")
            seen.add(rel)
            f = self.path / rel
            if not f.is_file():
                problems.append(f"{rel}: listed in the manifest but missing")
            elif sha256_file(f) != b.get("sha256"):
                problems.append(f"{rel}: checksum mismatch")
            elif pq.ParquetFile(f).metadata.num_rows != b.get("rows"):
                problems.append(f"{rel}: {pq.ParquetFile(f).metadata.num_rows} rows, manifest says {b.get('rows')}")
        return problems

    def orphans(self) -> list[str]:
        """Files left by interrupted writes: temporary files and batch files the manifest does not list."""
        listed = {b["file"] for b in self.manifest()["batches"]}
        found = [f"log/{f.name}" for f in (self.path / "log").iterdir() if f"log/{f.name}" not in listed]
        found += [f.name for f in self.path.iterdir() if f.name.startswith(_TMP_PREFIX)]
        return sorted(found)

    def read_log(self, *, with_superseded: bool = True) -> pd.DataFrame:
        """Every committed row of the release log, in batch order.

        Parameters
        ----------
        with_superseded : bool
            With ``False`` only the value in force for each (variable, period, release) is kept
            (the one from the latest batch).

        Returns
        -------
        pandas.DataFrame
            Columns variable (str), period (str label), release (datetime64[s]), value (float64),
            batch (int32).
        """
        return _read_log(self.path, self.manifest(), with_superseded=with_superseded)

    def cube(self, variables=None):
        """The release cube (see :class:`vintages.cube.Cube`) of one committed state.

        Parameters
        ----------
        variables : list of str, optional
            Restrict the cube to these variables (default: all).
        """
        from vintages.cube import Cube

        m = self.manifest()  # one snapshot: log, metadata and checksum agree
        names = None if variables is None else list(variables)
        log = _read_log(self.path, m, with_superseded=False, variables=names)
        return Cube.from_log(log, m["variables"], variables=names, checksum=_checksum(m))

    # ----------------------------------------------------------------- writing
    @contextmanager
    def _lock(self) -> Iterator[None]:
        """Hold the writer's lock; raise StoreLockedError at once if another writer has it."""
        fd = os.open(self.path / ".lock", os.O_RDWR | os.O_CREAT, 0o644)
        try:
            try:
                # flock locks belong to the open file description, so a second open in this
                # process (another thread) is refused as well as another process.
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError as exc:
                raise StoreLockedError(f"{self.path}: another writer holds the store's lock "
                                       f"({self.path / '.lock'}); try again when it has finished") from exc
            yield
        finally:
            os.close(fd)  # closing releases the lock, also when the process dies

    def set_metadata(self, name: str, *, units: str | None = None, description: str | None = None) -> None:
        """Update a known variable's units or description (its frequency never changes).

        Raises
        ------
        KeyError
            When ``name`` is not a variable of the store.
        StoreLockedError
            When another writer holds the lock.
        """
        with self._lock():
            m = self.manifest()
            if name not in m["variables"]:
                raise KeyError(f"unknown variable {name!r}; known: {sorted(m['variables'])}")
            if units is not None:
                m["variables"][name]["units"] = units
            if description is not None:
                m["variables"][name]["description"] = description
            atomic_write_bytes(self.path / "manifest.json", _dump(m))

    def append(self, releases: pd.DataFrame, variables: dict[str, dict] | None = None, *,
               supersede: bool = False, source: str | None = None, reason: str | None = None,
               allow_early: bool = False,
               _crash_hook: Callable[[str], None] | None = None) -> AppendResult:
        """Append a validated batch of releases atomically.

        Parameters
        ----------
        releases : DataFrame
            Columns ``variable`` (str), ``period`` (label or Period), ``release`` (date),
            ``value`` (float); e.g. the result of :func:`vintages.ingest.read_releases`.
        variables : dict, optional
            Metadata for new variables: ``{name: {"freq": "Q"|"M", "units": ..., "description": ...}}``.
            The frequency of a new variable is inferred from its period labels when not given;
            a frequency given for a known variable must match the store's. Units and
            descriptions of known variables change only through :meth:`set_metadata`.
        supersede : bool
            Allow changing a value already published for the same (variable, period, release).
            The old value stays in the log; an audit record names both.
        source : str, optional
            Where the batch came from (file name), for messages and the manifest; defaults to
            ``releases.attrs["source"]`` (set by ``read_releases``) or ``"<table>"``.
        reason : str, optional
            Why values are superseded, kept in the audit records.
        allow_early : bool
            Accept release dates on or before the end of the reference period (forecasts-as-data).

        Returns
        -------
        AppendResult
            ``batch_file`` is None when nothing was new (re-ingesting identical data is a no-op).

        Raises
        ------
        InputError
            When the batch is malformed (see :func:`vintages.ingest.validate_table`); the store
            is untouched.
        ReleaseConflictError
            When a value would change and ``supersede`` is false; the store is untouched.
        StoreLockedError
            When another writer holds the lock.
        """
        from vintages.ingest import validate_table

        variables = dict(variables or {})
        with self._lock():
            m = self.manifest()
            known = {k: dict(v) for k, v in m["variables"].items()}
            batch = validate_table(releases, known=known, new_meta=variables, source=source,
                                   allow_early=allow_early)
            src = batch.attrs["source"]
            new_vars = {}
            for name, freq in sorted(batch.attrs["freqs"].items()):
                if name not in known:
                    meta = {"freq": freq, "units": "", "description": ""}
                    meta.update({k: str(v) for k, v in (variables.get(name) or {}).items()
                                 if k in ("units", "description") and v is not None})
                    new_vars[name] = meta
            # Only rows of this batch's variables can conflict: read just those (cheap filter).
            batch_vars = sorted(set(batch.attrs["freqs"]) & set(known))
            old_value = (_lookup(batch, _read_log(self.path, m, with_superseded=False, variables=batch_vars))
                         if batch_vars else np.full(len(batch), np.nan))
            present = ~np.isnan(old_value)
            same = present & (old_value == batch["value"].to_numpy())
            conflict = present & ~same
            if conflict.any() and not supersede:
                i = int(np.argmax(conflict))
                c = batch.iloc[i]
                raise ReleaseConflictError(
                    f"{src}: {int(conflict.sum())} value(s) would change what was already published, "
                    f"e.g. {c['variable']} {c['period']} released {pd.Timestamp(c['release']).date()}: "
                    f"stored {float(old_value[i])!r}, new {float(c['value'])!r}. A correction is a new "
                    "release date; to replace a published value on purpose pass supersede (--supersede)")
            fresh = batch[~same]
            if fresh.empty and not new_vars:
                return AppendResult(0, int(same.sum()), 0, None)
            seq = len(m["batches"]) + 1
            data = _batch_bytes(fresh, seq)
            digest = hashlib.sha256(data).hexdigest()
            rel = f"log/{seq:06d}-{digest[:12]}.parquet"
            if _crash_hook:
                _crash_hook("before-batch")
            atomic_write_bytes(self.path / rel, data)
            if _crash_hook:
                _crash_hook("before-manifest")
            m["variables"].update(new_vars)
            now = _now()
            m["batches"].append({"seq": seq, "file": rel, "sha256": digest, "rows": len(fresh),
                                 "source": str(src), "created": now, "supersede": bool(conflict.any())})
            if conflict.any():
                sup = batch[conflict]
                m["audit"].extend(
                    {"batch": seq, "time": now, "variable": v, "period": p, "release": str(r), "old": float(o),
                     "new": float(x), "reason": reason or "superseded on request"}
                    for v, p, r, o, x in zip(sup["variable"].tolist(), sup["period"].tolist(),
                                             sup["release"].to_numpy().astype("datetime64[D]"),
                                             old_value[conflict], sup["value"].tolist(), strict=True))
            atomic_write_bytes(self.path / "manifest.json", _dump(m))
            if _crash_hook:
                _crash_hook("after-manifest")
            return AppendResult(len(fresh), int(same.sum()), int(conflict.sum()), rel)

    def info(self) -> pd.DataFrame:
        """One row per variable: frequency, units, periods, releases, first/last period and release."""
        m = self.manifest()
        log = _read_log(self.path, m, with_superseded=False)
        groups = dict(tuple(log.groupby("variable", sort=True))) if len(log) else {}
        rows = []
        for name, meta in sorted(m["variables"].items()):
            sub = groups.get(name)
            row = {"variable": name, "freq": meta["freq"], "units": meta.get("units", "")}
            if sub is not None and len(sub):
                o, _ = parse_periods(sub["period"].to_numpy())
                first, last = format_periods([o.min(), o.max()], meta["freq"])
                row.update({"periods": int(sub["period"].nunique()), "releases": int(sub["release"].nunique()),
                            "first_period": first, "last_period": last,
                            "first_release": sub["release"].min().date(),
                            "last_release": sub["release"].max().date()})
            else:
                row.update({"periods": 0, "releases": 0})
            row["description"] = meta.get("description", "")
            rows.append(row)
        return pd.DataFrame(rows)


def _is_log_name(rel: str) -> bool:
    """A manifest entry must name a plain file directly under log/ (no path tricks)."""
    parts = rel.split("/")
    return len(parts) == 2 and parts[0] == "log" and parts[1] not in ("", ".", "..") and "\\" not in rel


def _read_log(root: Path, m: dict, *, with_superseded: bool, variables: list[str] | None = None) -> pd.DataFrame:
    """The rows of the files a manifest lists, optionally only some variables'."""
    tables = []
    for b in m["batches"]:
        t = pq.read_table(root / b["file"], schema=_SCHEMA)
        if variables is not None:
            t = t.filter(pc.is_in(t["variable"], value_set=pa.array(sorted(variables), pa.string())))
        tables.append(t)
    table = pa.concat_tables(tables) if tables else _SCHEMA.empty_table()
    # Cast the day column in Arrow: pandas would otherwise build one Python date per row.
    table = table.set_column(2, "release", pc.cast(table["release"], pa.timestamp("s")))
    df = table.to_pandas()
    if not with_superseded and len(df):
        df = df.drop_duplicates(_KEY, keep="last")
    return df.reset_index(drop=True)


def _lookup(batch: pd.DataFrame, old: pd.DataFrame) -> np.ndarray:
    """For each batch row, the value in force in ``old`` for the same cell (NaN if none)."""
    if old.empty:
        return np.full(len(batch), np.nan)
    # Both sides hold canonical labels (validated on the way in), so plain equality of keys works.
    right = old[_KEY + ["value"]].rename(columns={"value": "_old"})
    left = batch[_KEY].assign(_pos=np.arange(len(batch)))
    hit = left.merge(right, on=_KEY, how="inner")
    out = np.full(len(batch), np.nan)
    out[hit["_pos"].to_numpy()] = hit["_old"].to_numpy()
    return out


def _batch_bytes(fresh: pd.DataFrame, seq: int) -> bytes:
    """The Parquet bytes of one batch (deterministic: same rows give the same file and name)."""
    table = pa.table({
        "variable": pa.array(fresh["variable"].to_numpy(dtype=object), pa.string()),
        "period": pa.array(fresh["period"].to_numpy(dtype=object), pa.string()),
        "release": pa.array(fresh["release"].to_numpy().astype("datetime64[D]"), pa.date32()),
        "value": pa.array(fresh["value"].to_numpy(dtype=np.float64), pa.float64()),
        "batch": pa.array(np.full(len(fresh), seq, dtype=np.int32), pa.int32()),
    }, schema=_SCHEMA)
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd")
    return sink.getvalue().to_pybytes()


def _checksum(m: dict) -> str:
    payload = json.dumps({"variables": m["variables"], "batches": [b["sha256"] for b in m["batches"]]},
                         sort_keys=True).encode()
    return hashlib.sha256(payload).hexdigest()


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


def _dump(obj) -> bytes:
    return (json.dumps(obj, indent=1, sort_keys=False) + "\n").encode()


def open_store(path) -> VintageStore:
    """Open an existing store (raises :class:`StoreNotFoundError` when there is none)."""
    return VintageStore(path)


__all__ = ["atomic_write_bytes", "VintageStore", "AppendResult", "open_store", "sha256_file", "InputError"]
