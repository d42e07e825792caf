"""The on-disk vintage store: an append-only Parquet release log plus a JSON manifest.

Layout of a store directory::

    STORE/manifest.json          format, variables' metadata, the list of batches with checksums, audit
    STORE/log/NNNNNN-<sha>.parquet   one file per accepted batch (variable, period, release, value, batch)
    STORE/.lock                  advisory lock held by the single writer

Laws (tested):

* Appending a release never changes what was known at any earlier date unless ``supersede`` is
  given, and even then the superseded value stays in the log with an audit record.
* A crash at any moment leaves the store equal to the state before or after the batch: the batch
  file is written to a temporary name, fsynced and renamed, and the manifest is replaced last.
  Files in ``log/`` that the manifest does not list are ignored by readers.
* Readers never take the lock; they read the manifest once and then only the files it lists.
"""

from __future__ import annotations

import datetime as _dt
import fcntl
import hashlib
import json
import os
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
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


@dataclass(frozen=True)
class AppendResult:
    """What an append did: rows written, rows already present, rows superseded, batch file."""

    written: int
    unchanged: int
    superseded: int
    batch_file: str | None

    def summary(self) -> str:
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


def _atomic_write_bytes(path: Path, data: bytes) -> None:
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", dir=path.parent)
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
    _fsync_dir(path.parent)


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

    # ----------------------------------------------------------------- creation and reading
    @classmethod
    def init(cls, path: str | os.PathLike, *, exist_ok: bool = False) -> VintageStore:
        """Create an empty store at ``path`` (the directory may exist but must be empty)."""
        p = Path(path)
        if (p / "manifest.json").exists():
            if exist_ok:
                return cls(p)
            raise FileExistsError(f"{p}: a vintage store already exists here")
        if p.exists() and any(p.iterdir()):
            raise FileExistsError(f"{p}: directory is not empty; choose a new path for the store")
        (p / "log").mkdir(parents=True, exist_ok=True)
        manifest = {"format": FORMAT, "created": _now(), "variables": {}, "batches": [], "audit": []}
        _atomic_write_bytes(p / "manifest.json", _dump(manifest))
        return cls(p)

    def manifest(self) -> dict:
        """The manifest as last committed (a fresh read: readers see a consistent snapshot)."""
        try:
            m = json.loads((self.path / "manifest.json").read_text())
        except (OSError, json.JSONDecodeError) as exc:
            raise StoreCorruptError(f"{self.path / 'manifest.json'}: unreadable manifest: {exc}") from exc
        if m.get("format") != FORMAT:
            raise StoreCorruptError(f"{self.path / 'manifest.json'}: format {m.get('format')!r}, expected {FORMAT!r}")
        return m

    @property
    def variables(self) -> dict[str, dict]:
        """Per-variable metadata: ``{name: {"freq", "units", "description"}}``."""
        return self.manifest()["variables"]

    def checksum(self) -> str:
        """A digest of the committed state (the batch checksums in order and the metadata)."""
        m = self.manifest()
        payload = json.dumps({"variables": m["variables"], "batches": [b["sha256"] for b in m["batches"]]},
                             sort_keys=True).encode()
        return hashlib.sha256(payload).hexdigest()

    def verify(self) -> list[str]:
        """Check every listed file against its checksum; return a list of problems (empty = sound).

        Files in ``log/`` that the manifest does not list (left by an interrupted append) are not
        problems: they were never committed.
        """
        problems = []
        for b in self.manifest()["batches"]:
            f = self.path / b["file"]
            if not f.is_file():
                problems.append(f"{b['file']}: listed in the manifest but missing")
            elif sha256_file(f) != b["sha256"]:
                problems.append(f"{b['file']}: checksum mismatch")
        return problems

    def read_log(self, *, with_superseded: bool = True) -> pd.DataFrame:
        """Every committed row of the release log, in batch order.

        Columns: variable (str), period (str label), release (datetime64), value (float64),
        batch (int). With ``with_superseded=False`` only the value in force for each
        (variable, period, release) is kept (the one from the latest batch).
        """
        m = self.manifest()
        tables = [pq.read_table(self.path / b["file"], schema=_SCHEMA) for b in m["batches"]]
        table = pa.concat_tables(tables) if tables else _SCHEMA.empty_table()
        df = table.to_pandas()
        df["release"] = pd.to_datetime(df["release"]).astype("datetime64[s]")
        if not with_superseded and len(df):
            df = df.drop_duplicates(["variable", "period", "release"], keep="last")
        return df.reset_index(drop=True)

    def cube(self, variables=None):
        """The release cube (see :class:`vintages.cube.Cube`)."""
        from vintages.cube import Cube

        return Cube.from_log(self.read_log(with_superseded=False), self.variables, variables=variables,
                             checksum=self.checksum())

    # ----------------------------------------------------------------- writing
    @contextmanager
    def _lock(self):
        fh = open(self.path / ".lock", "a+")
        try:
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError as exc:
                raise StoreLockedError(f"{self.path}: another writer holds the store's lock; "
                                       "try again when it has finished") from exc
            yield
        finally:
            fh.close()

    def set_metadata(self, name: str, *, units: str | None = None, description: str | None = None) -> None:
        """Update a known variable's units or description (its frequency never changes)."""
        with self._lock():
            m = self.manifest()
            if name not in m["variables"]:
                raise KeyError(f"unknown variable {name!r}; known: {sorted(m['variables'])}")
            if units is not None:
                m["variables"][name]["units"] = units
            if description is not None:
                m["variables"][name]["description"] = description
            _atomic_write_bytes(self.path / "manifest.json", _dump(m))

    def append(self, releases: pd.DataFrame, variables: dict[str, dict] | None = None, *,
               supersede: bool = False, source: str = "<table>", reason: str | None = None,
               allow_early: bool = False, _crash_hook=None) -> AppendResult:
        """Append a validated batch of releases atomically.

        Parameters
        ----------
        releases : DataFrame
            Columns ``variable`` (str), ``period`` (label or Period), ``release`` (date),
            ``value`` (float). Validate files first with :func:`vintages.ingest.read_releases`.
        variables : dict, optional
            Metadata for new variables: ``{name: {"freq": "Q"|"M", "units": ..., "description": ...}}``.
            The frequency of a new variable is inferred from its period labels when not given.
        supersede : bool
            Allow changing a value already published for the same (variable, period, release).
            The old value stays in the log; an audit record names both.
        source : str
            Where the batch came from (file name), kept in the manifest.
        allow_early : bool
            Accept release dates on or before the end of the reference period (forecasts-as-data).

        Returns
        -------
        AppendResult

        Raises
        ------
        ReleaseConflictError
            When a value would change and ``supersede`` is false.
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
            new_vars = {}
            for name, freq in batch.attrs["freqs"].items():
                if name not in known:
                    meta = {"freq": freq, "units": "", "description": ""}
                    meta.update({k: v for k, v in variables.get(name, {}).items() if k in ("units", "description")})
                    new_vars[name] = meta
            existing = self.read_log(with_superseded=False)
            key = ["variable", "period", "release"]
            merged = batch.merge(existing[key + ["value"]], on=key, how="left", suffixes=("", "_old"))
            same = merged["value_old"].notna() & (merged["value_old"] == merged["value"])
            conflict = merged["value_old"].notna() & ~same
            if conflict.any() and not supersede:
                c = merged[conflict].iloc[0]
                raise ReleaseConflictError(
                    f"{source}: {int(conflict.sum())} value(s) would change what was already published, "
                    f"e.g. {c['variable']} {c['period']} released {pd.Timestamp(c['release']).date()}: "
                    f"stored {float(c['value_old'])!r}, new {float(c['value'])!r}. A correction is a new release date; "
                    "to replace a published value on purpose pass supersede (--supersede)")
            fresh = merged[~same]
            if fresh.empty and not new_vars:
                return AppendResult(0, int(same.sum()), 0, None)
            seq = len(m["batches"]) + 1
            table = pa.Table.from_pandas(
                pd.DataFrame({
                    "variable": fresh["variable"].astype(str).to_numpy(),
                    "period": fresh["period"].astype(str).to_numpy(),
                    "release": pd.to_datetime(fresh["release"]).dt.date.to_numpy(),
                    "value": fresh["value"].astype("float64").to_numpy(),
                    "batch": np.full(len(fresh), seq, dtype=np.int32),
                }),
                schema=_SCHEMA, preserve_index=False,
            )
            sink = pa.BufferOutputStream()
            pq.write_table(table, sink, compression="zstd")
            data = sink.getvalue().to_pybytes()
            digest = hashlib.sha256(data).hexdigest()
            rel = f"log/{seq:06d}-{digest[:12]}.parquet"
            if _crash_hook:
                _crash_hook("before-batch")
            _atomic_write_bytes(self.path / rel, data)
            if _crash_hook:
                _crash_hook("before-manifest")
            m["variables"].update(new_vars)
            now = _now()
            m["batches"].append({"seq": seq, "file": rel, "sha256": digest, "rows": len(fresh),
                                 "source": str(source), "created": now, "supersede": bool(conflict.any())})
            for _, r in merged[conflict].iterrows():
                m["audit"].append({"batch": seq, "time": now, "variable": r["variable"], "period": r["period"],
                                   "release": str(pd.Timestamp(r["release"]).date()),
                                   "old": float(r["value_old"]), "new": float(r["value"]),
                                   "reason": reason or "superseded on request"})
            _atomic_write_bytes(self.path / "manifest.json", _dump(m))
            if _crash_hook:
                _crash_hook("after-manifest")
            return AppendResult(len(fresh), int(same.sum()), int(conflict.sum()), rel)

    def info(self) -> pd.DataFrame:
        """One row per variable: frequency, units, periods, releases, first/last period and release."""
        log = self.read_log(with_superseded=False)
        rows = []
        for name, meta in sorted(self.variables.items()):
            sub = log[log["variable"] == name]
            if len(sub):
                o, _ = parse_periods(sub["period"].to_numpy())
                first, last = format_periods([o.min(), o.max()], meta["freq"])
                rows.append({"variable": name, "freq": meta["freq"], "units": meta.get("units", ""),
                             "periods": int(sub["period"].nunique()), "releases": int(sub["release"].nunique()),
                             "first_period": first, "last_period": last,
                             "first_release": sub["release"].min().date(), "last_release": sub["release"].max().date(),
                             "description": meta.get("description", "")})
            else:
                rows.append({"variable": name, "freq": meta["freq"], "units": meta.get("units", ""), "periods": 0,
                             "releases": 0, "description": meta.get("description", "")})
        return pd.DataFrame(rows)


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


def _dump(obj) -> bytes:
    return (json.dumps(obj, indent=1, sort_keys=False) + "\n").encode()


def open_store(path) -> VintageStore:
    """Open an existing store (raises :class:`StoreNotFoundError` when there is none)."""
    return VintageStore(path)


__all__ = ["VintageStore", "AppendResult", "open_store", "sha256_file", "InputError"]
