"""The on-disk vintage store: an append-only Parquet release log plus a JSON manifest.

Layout of a store directory::

    STORE/manifest.json              format, variables' metadata, the batch chain, audit records,
                                     the manifest's own checksum
    STORE/log/NNNNNN-<sha>.parquet   one file per accepted batch (variable, period, release, value, batch)
    STORE/.lock                      advisory lock (``flock``) held by the single writer; created by init

Format ``vintage-store/2`` (written by this version)
----------------------------------------------------
* Every batch entry (``seq``, ``file``, ``sha256``, ``rows``, ``source``, ``created``,
  ``supersede``) carries ``prev``: the hash of the previous entry (``""`` for the first). The
  hash of an entry is the SHA-256 of its canonical JSON (sorted keys, no spaces) and ``head``
  is the hash of the last entry. Reordering, removing or editing an entry breaks the chain.
* ``manifest_sha256`` is the SHA-256 of the canonical JSON of every other key of the manifest:
  any edit of metadata (a frequency, units), of the batch list or of the audit is refused on
  the next read. Whitespace and key order of the file do not matter (they change nothing read).
* ``audit`` holds one record per superseded value; ``metadata_audit`` one record per change made
  by :meth:`VintageStore.describe` (variable, field, old, new, time, reason).
* ``upgraded`` records when a ``vintage-store/1`` manifest was rewritten in this format.

These checksums protect against accidents (disk or copy errors, hand edits, a stray tool); a
person who recomputes them on purpose is not stopped (that would need signatures). A run's
provenance records :meth:`VintageStore.checksum`, which covers every batch's checksum in order,
so such a rewrite still shows against every earlier run.

Format ``vintage-store/1`` (earlier versions) is still read: the batch files' checksums are
verified as in format 2, but the manifest has no checksum and no chain (:meth:`format_note`
says so). The next write (append, describe) rewrites the manifest in format 2; the batch files
are not touched, and :meth:`checksum` keeps its value.

Laws (tested)
-------------
* Appending a release never changes what was known at any earlier date unless ``supersede`` is
  given, and even then the superseded value stays in the log with an audit record.
* A crash at any moment leaves the store equal to the state before or after the append (of one
  batch or of several, :meth:`VintageStore.append_many`): batch files are written to temporary
  names, fsynced and renamed, and the manifest, which alone lists them, is replaced last (the
  same way). Files in ``log/`` that the manifest does not list, and temporary files, are left
  by an interrupted write: readers ignore them, :meth:`VintageStore.orphans` lists them and
  :meth:`VintageStore.cleanup` removes them.
* Every read verifies the manifest's checksum and chain, refuses a listed path outside ``log/``
  and checks the SHA-256 of every batch file it opens before decoding it (a mismatch raises
  :class:`StoreCorruptError` naming the file). Verified files are remembered per process by
  (device, inode, size, mtime, ctime) so repeated reads stay fast; a file changed less than a
  second before it was hashed is not remembered (any later change moves its ctime, which no
  program can set back).
* Readers never take the lock; they read the manifest once and then only the files it lists,
  which are never rewritten, so a reader sees one committed state even while a writer works.
* Every file is written through :func:`atomic_write_bytes` / :func:`atomic_writer` (temporary
  file, fsync, rename), created with the process umask (``0o666 & ~umask``); a failed write
  (full disk, permissions) raises :class:`FileAccessError` naming the file and leaves no
  temporary file behind. The one exception is the lock file when it is missing: it is created
  in place and never replaced, since two writers locking two different inodes would both "hold"
  the lock.
"""

from __future__ import annotations

import datetime as _dt
import errno as _errno
import fcntl
import hashlib
import io
import json
import os
import re
import secrets
import stat
import time
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from vintages.errors import (
    FileAccessError,
    InputError,
    MetadataConflictError,
    ReleaseConflictError,
    StoreCorruptError,
    StoreLockedError,
    StoreNotFoundError,
    UnknownNameError,
    printable_path,
)
from vintages.periods import format_periods, parse_periods

FORMAT = "vintage-store/2"
#: Formats this version reads (the older ones with a note, see :meth:`VintageStore.format_note`).
READ_FORMATS = ("vintage-store/1", FORMAT)
LOG_COLUMNS = ("variable", "period", "release", "value", "batch")
#: Metadata fields :meth:`VintageStore.describe` may change (the frequency never changes).
META_FIELDS = ("units", "description", "transform_hint")
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
_BATCH_NAME = re.compile(r"^log/(?P<seq>[0-9]{6,})-(?P<sha>[0-9a-f]{12})\.parquet$")
_HEX64 = re.compile(r"^[0-9a-f]{64}$")
_ENTRY_KEYS = {"seq": int, "file": str, "sha256": str, "rows": int, "source": str, "created": str,
               "supersede": bool}
_V2_ONLY = ("head", "manifest_sha256", "metadata_audit", "upgraded")
# A file changed less than this long before it was hashed is not remembered as verified: file
# times have a coarse granularity, so a second write within it could keep the same times.
_RACY_NS = 1_000_000_000
_VERIFIED: dict[tuple, str] = {}  # (path, dev, ino, size, mtime_ns, ctime_ns) -> verified sha256


@dataclass(frozen=True)
class AppendResult:
    """What one batch of an append did: rows written, already present, superseded; batch file.

    ``warnings`` holds remarks for people (e.g. a new variable without units); ``source`` is
    the name the batch was given (file name).
    """

    written: int
    unchanged: int
    superseded: int
    batch_file: str | None
    warnings: tuple[str, ...] = ()
    source: str = ""

    def summary(self) -> str:
        """One line for people: what was written where."""
        if self.batch_file is None:
            return f"nothing new: all {self.unchanged} values already in the store"
        extra = f", {self.superseded} superseded (audit kept)" if self.superseded else ""
        return f"{self.written} values written to {self.batch_file} ({self.unchanged} already present{extra})"


@dataclass(frozen=True)
class CleanupResult:
    """What :meth:`VintageStore.cleanup` found: files it may remove, removed, and left alone."""

    removable: tuple[str, ...]
    removed: tuple[str, ...]
    kept: tuple[str, ...] = field(default=())

    def summary(self) -> str:
        """One line for people."""
        if self.removed:
            return f"removed {len(self.removed)} file(s) left by interrupted writes"
        if self.removable:
            return (f"{len(self.removable)} file(s) left by interrupted writes (dry run: nothing "
                    "removed; pass --apply to remove them)")
        return "no files left by interrupted writes"


# --------------------------------------------------------------------------- atomic writes
def _access_error(path: Path, action: str, exc: OSError, tail: str = "") -> FileAccessError:
    why = exc.strerror or type(exc).__name__
    return FileAccessError(f"{printable_path(path)}: cannot {action} ({why}){tail}",
                           errno=exc.errno, filename=str(path))


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


@contextmanager
def atomic_writer(path: str | os.PathLike) -> Iterator[io.BufferedWriter]:
    """Yield a binary file whose content replaces ``path`` atomically when the block ends.

    The data go to a temporary file in the same directory, created with mode
    ``0o666 & ~umask`` (like any new file), then fsynced, renamed over ``path`` and the
    directory fsynced. If the block or the write fails, the temporary file is removed and
    ``path`` is untouched.

    Raises
    ------
    FileAccessError
        On any operating-system error (full disk, permissions, ``path`` a directory), naming
        ``path``.
    """
    path = Path(path)
    if path.is_dir():
        raise FileAccessError(f"{printable_path(path)}: is a directory; give a file name",
                              errno=_errno.EISDIR, filename=str(path))
    tmp = path.parent / f"{_TMP_PREFIX}{secrets.token_hex(8)}"
    try:
        # O_EXCL with mode 0o666: the kernel applies the umask (mkstemp would force 0o600).
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, 0o666)
    except OSError as exc:
        raise _access_error(path, "write", exc, "; nothing was changed") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        except OSError:
            pass  # cannot even remove it: cleanup lists it later
        if isinstance(exc, OSError) and not isinstance(exc, FileAccessError):
            raise _access_error(path, "write", exc, "; nothing was changed") from None
        raise
    try:
        _fsync_dir(path.parent)  # the rename itself must reach the disk before we go on
    except OSError as exc:
        raise _access_error(path.parent, "sync directory", exc) from None


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Replace ``path`` by ``data`` atomically (see :func:`atomic_writer`)."""
    with atomic_writer(path) as fh:
        fh.write(data)


def sha256_file(path: str | os.PathLike) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def sha256_matches(path: str | os.PathLike, digest: str) -> bool:
    """Whether ``path``'s SHA-256 starts with ``digest`` (a full or shortened hex digest).

    A match is remembered per process under the same file identity as the batch reads use
    (device, inode, size, modification and change times; not for a file changed within the
    last moments), so a content-addressed file is hashed once however often it is read.
    """
    st = os.stat(path)
    key = (str(path), st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)
    if _VERIFIED.get(key, "").startswith(digest):
        return True
    t0 = time.time_ns()
    full = sha256_file(path)
    if not full.startswith(digest):
        return False
    if max(st.st_mtime_ns, st.st_ctime_ns) < t0 - _RACY_NS:
        _VERIFIED[key] = full
    return True


# --------------------------------------------------------------------------- the manifest
def _canonical(obj) -> bytes:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False).encode()


def entry_hash(entry: dict) -> str:
    """The chain hash of one batch entry: SHA-256 of its canonical JSON (``prev`` included)."""
    return hashlib.sha256(_canonical(entry)).hexdigest()


def manifest_digest(m: dict) -> str:
    """SHA-256 of the canonical JSON of a manifest without its ``manifest_sha256`` key."""
    return hashlib.sha256(_canonical({k: v for k, v in m.items() if k != "manifest_sha256"})).hexdigest()


def _parse_manifest(data: bytes, where: str) -> dict:
    """Decode manifest bytes (strict UTF-8 JSON object); StoreCorruptError naming ``where``."""
    try:
        m = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise StoreCorruptError(f"{where}: unreadable manifest: {_first_line(exc)}") from None
    except RecursionError:
        raise StoreCorruptError(f"{where}: unreadable manifest: nested too deeply") from None
    if not isinstance(m, dict):
        raise StoreCorruptError(f"{where}: format {type(m).__name__!r}, expected {FORMAT!r}")
    if m.get("format") not in READ_FORMATS:
        raise StoreCorruptError(f"{where}: format {m.get('format')!r}, expected {FORMAT!r} "
                                f"(readable: {sorted(READ_FORMATS)})")
    return m


def manifest_problems(m: dict) -> list[str]:
    """Every inconsistency of a parsed manifest (empty = sound); file contents are not read."""
    fmt = m.get("format")
    out: list[str] = []
    if fmt == FORMAT:
        got = m.get("manifest_sha256")
        if not isinstance(got, str) or not _HEX64.match(got):
            out.append("manifest has no valid manifest_sha256")
        elif got != manifest_digest(m):
            out.append("manifest checksum mismatch: the manifest was changed after it was written")
    else:
        extra = [k for k in _V2_ONLY if k in m]
        if extra:
            out.append(f"manifest says format {fmt!r} but holds {FORMAT!r} keys {extra}")
    variables = m.get("variables")
    if not isinstance(variables, dict):
        out.append("manifest 'variables' is not a mapping")
        variables = {}
    for name, meta in variables.items():
        if not isinstance(meta, dict) or meta.get("freq") not in ("Q", "M"):
            out.append(f"variable {name!r}: metadata without a frequency 'Q' or 'M'")
        elif any(not isinstance(meta.get(k, ""), str) for k in META_FIELDS):
            out.append(f"variable {name!r}: metadata that is not text")
    for key in ("audit", "metadata_audit"):
        if key in m and not isinstance(m[key], list):
            out.append(f"manifest {key!r} is not a list")
    batches = m.get("batches")
    if not isinstance(batches, list):
        return out + ["manifest 'batches' is not a list"]
    prev, seen = "", set()
    for k, b in enumerate(batches, start=1):
        if not isinstance(b, dict):
            out.append(f"batch entry {k}: not a mapping")
            prev = None
            continue
        rel = b.get("file")
        label = rel if isinstance(rel, str) else f"batch entry {k}"
        bad_type = [key for key, t in _ENTRY_KEYS.items()
                    if not isinstance(b.get(key), t) or (t is int and isinstance(b.get(key), bool))]
        if bad_type:
            out.append(f"{label!r}: entry {k} lacks or mistypes {bad_type}")
        if b.get("seq") != k:
            out.append(f"{label}: batch number {b.get('seq')!r}, expected {k}")
        name = _BATCH_NAME.match(rel) if isinstance(rel, str) else None
        if name is None:
            out.append(f"{label!r}: not a batch file name under log/ (log/NNNNNN-<sha>.parquet)")
        else:
            if int(name["seq"]) != b.get("seq"):
                out.append(f"{rel}: file name says batch {int(name['seq'])}, entry says {b.get('seq')!r}")
            sha = b.get("sha256")
            if not isinstance(sha, str) or not _HEX64.match(sha) or not sha.startswith(name["sha"]):
                out.append(f"{rel}: recorded sha256 does not match the file name")
        if rel in seen:
            out.append(f"{rel}: listed twice")
        seen.add(rel)
        if fmt == FORMAT:
            if prev is not None and b.get("prev") != prev:
                out.append(f"{label}: batch chain broken (entry {k} does not follow entry {k - 1}: "
                           "batches reordered, removed or edited)")
            prev = entry_hash(b)
    if fmt == FORMAT and batches and prev is not None and m.get("head") != prev:
        out.append("batch chain head mismatch: the last batch entry was removed or edited")
    if fmt == FORMAT and not batches and m.get("head") != "":
        out.append("batch chain head mismatch: the manifest lists no batches but has a head")
    return out


def _seal(m: dict, now: str) -> dict:
    """The manifest to write: format 2, the batch chain, the head and the checksum."""
    out = {k: v for k, v in m.items() if k != "manifest_sha256"}
    if out.get("format") != FORMAT:
        out["upgraded"] = {"from": out.get("format"), "time": now}
        out["format"] = FORMAT
    out.setdefault("audit", [])
    out.setdefault("metadata_audit", [])
    prev = ""
    for b in out["batches"]:
        b["prev"] = prev  # recomputing is idempotent on a verified manifest; it chains a v1 one
        prev = entry_hash(b)
    out["head"] = prev
    out["manifest_sha256"] = manifest_digest(out)
    return out


def _dump(obj) -> bytes:
    return (json.dumps(obj, indent=1, sort_keys=False, allow_nan=False) + "\n").encode()


def _first_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text[:200] + ("\u2026" if len(text) > 200 else "")


# --------------------------------------------------------------------------- batch files
def _open_batch(root: Path, b: dict, *, use_cache: bool = True) -> bytes:
    """Bytes of a listed batch file, its SHA-256 checked (skipped when remembered as verified).

    Refuses anything but a regular file directly under ``root/log`` (no symbolic link, device
    or path outside the store), whatever the manifest says. The bytes returned are the bytes
    checked (decoding never re-opens the file by name).
    """
    rel = b["file"]
    if _BATCH_NAME.match(rel) is None:  # manifest() checked it already: never follow a bad path
        raise StoreCorruptError(f"{rel!r}: not a batch file name under log/; refusing to read it")
    f = root / rel
    try:
        fd = os.open(f, os.O_RDONLY | os.O_NOFOLLOW | os.O_CLOEXEC | os.O_NONBLOCK)
    except FileNotFoundError:
        raise StoreCorruptError(f"{printable_path(f)}: listed in the manifest but missing") from None
    except OSError as exc:
        if exc.errno == _errno.ELOOP:
            raise StoreCorruptError(f"{printable_path(f)}: a symbolic link, not a batch file; "
                                    "refusing to read it") from None
        raise _access_error(f, "read", exc) from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise StoreCorruptError(f"{printable_path(f)}: not a regular file; refusing to read it")
        key = (str(f), st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)
        t0 = time.time_ns()
        with os.fdopen(fd, "rb", closefd=False) as fh:
            data = fh.read()
    except OSError as exc:
        raise _access_error(f, "read", exc) from None
    finally:
        os.close(fd)
    if use_cache and _VERIFIED.get(key) == b["sha256"] and len(data) == st.st_size:
        return data
    if hashlib.sha256(data).hexdigest() != b["sha256"]:
        raise StoreCorruptError(f"{printable_path(f)}: checksum mismatch (the file changed after it "
                                "was committed)")
    if len(data) == st.st_size and max(st.st_mtime_ns, st.st_ctime_ns) < t0 - _RACY_NS:
        _VERIFIED[key] = b["sha256"]
    return data


def _decode(root: Path, b: dict, data: bytes | None, columns=None) -> pa.Table:
    f = root / b["file"]
    try:
        src = pa.BufferReader(data) if data is not None else str(f)
        t = pq.read_table(src, schema=_SCHEMA, columns=columns)
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise StoreCorruptError(f"{printable_path(f)}: unreadable batch file: {_first_line(exc)}") from None
    if t.num_rows != b["rows"]:
        raise StoreCorruptError(f"{printable_path(f)}: {t.num_rows} rows, manifest says {b['rows']}")
    return t


def _read_log(root: Path, m: dict, *, with_superseded: bool, variables: list[str] | None = None,
              columns: list[str] | None = None, check_labels: bool = False,
              _verify: bool = True) -> pd.DataFrame:
    """The rows of the files a manifest lists (each file's checksum verified before decoding).

    ``check_labels`` refuses stored period labels that do not parse with their variable's
    frequency (see :func:`_check_labels`). ``_verify=False`` reads the files by name without
    checksums: only for the benchmark that states their cost.
    """
    cols = list(LOG_COLUMNS) if columns is None else list(columns)
    read_cols = cols if not check_labels else list(dict.fromkeys(cols + ["variable", "period", "batch"]))
    tables = []
    for b in m["batches"]:
        data = _open_batch(root, b) if _verify else None
        t = _decode(root, b, data, columns=read_cols)
        if variables is not None:
            t = t.filter(pc.is_in(t["variable"], value_set=pa.array(sorted(variables), pa.string())))
        tables.append(t)
    schema = pa.schema([_SCHEMA.field(c) for c in read_cols])
    table = pa.concat_tables(tables) if tables else schema.empty_table()
    if check_labels:
        _check_labels(root, m, table)
    table = table.select(cols)
    if "release" in cols:
        # Cast the day column in Arrow: pandas would otherwise build one Python date per row.
        i = cols.index("release")
        table = table.set_column(i, "release", pc.cast(table["release"], pa.timestamp("s")))
    df = table.to_pandas()
    if not with_superseded and len(df):
        df = df.drop_duplicates(_KEY, keep="last")
    return df.reset_index(drop=True)


def _check_labels(root: Path, m: dict, table: pa.Table) -> None:
    """Refuse stored period labels that do not parse with their variable's frequency.

    Earlier versions could store misread labels (e.g. ``0Q3`` from full-width digits); reading
    them as some other period would be silent and wrong, so the read stops and names the batch.
    Only distinct (variable, period) pairs are parsed, grouped in Arrow (cheap).
    """
    if table.num_rows == 0:
        return
    pairs = table.group_by(["variable", "period"], use_threads=False).aggregate([("batch", "min")])
    var = pairs["variable"].to_numpy(zero_copy_only=False).astype(object)
    lab = pairs["period"].to_numpy(zero_copy_only=False).astype(object)
    freq_of_var = {k: v["freq"] for k, v in m["variables"].items()}
    want = np.array([freq_of_var.get(v, "") for v in var], dtype="<U1")
    _, got = parse_periods(lab)
    bad = np.flatnonzero(got != want)
    if len(bad):
        i = bad[0]
        seq = int(pairs["batch_min"][int(i)].as_py())
        f = m["batches"][seq - 1]["file"] if 0 < seq <= len(m["batches"]) else f"batch {seq}"
        what = f"variable {var[i]!r} is not in the manifest" if want[i] == "" else (
            f"period {lab[i]!r} of {var[i]!r} is not a valid {'quarterly' if want[i] == 'Q' else 'monthly'} label")
        raise StoreCorruptError(f"{printable_path(root / f)}: {what} ({len(bad)} such label(s) in the store; an "
                                "earlier version could store misread labels); run 'vintage-harness vintages verify'")


def _lookup(batch: pd.DataFrame, old: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """For each batch row, the value in force in ``old`` for the same cell (NaN if none) and
    where it came from (``old["_from"]``: "" for the store, else a source of this append)."""
    n = len(batch)
    if old.empty:
        return np.full(n, np.nan), np.full(n, "", dtype=object)
    # Both sides hold canonical labels (validated on the way in), so plain equality of keys works.
    right = old[_KEY + ["value", "_from"]].rename(columns={"value": "_old"})
    left = batch[_KEY].assign(_pos=np.arange(n))
    hit = left.merge(right, on=_KEY, how="inner")
    out = np.full(n, np.nan)
    src = np.full(n, "", dtype=object)
    pos = hit["_pos"].to_numpy()
    out[pos] = hit["_old"].to_numpy()
    src[pos] = hit["_from"].to_numpy(dtype=object)
    return out, src


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
    """The store digest recorded in run provenance: metadata and batch checksums in order.

    Unchanged from format 1 (an upgraded store keeps its digest).
    """
    payload = json.dumps({"variables": m["variables"], "batches": [b["sha256"] for b in m["batches"]]},
                         sort_keys=True).encode()
    return hashlib.sha256(payload).hexdigest()


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


def _as_item(item) -> tuple[pd.DataFrame, dict, str | None]:
    """One append_many item as (releases, variables, source)."""
    if isinstance(item, pd.DataFrame):
        return item, {}, None
    if isinstance(item, tuple) and 1 <= len(item) <= 3:
        df, meta, src = (tuple(item) + (None, None))[:3]
        if isinstance(df, pd.DataFrame):
            return df, dict(meta or {}), src
    raise TypeError("append_many takes DataFrames or (releases, variables, source) tuples; "
                    f"got {type(item).__name__}")


# --------------------------------------------------------------------------- the store
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
            raise StoreNotFoundError(f"{printable_path(self.path)}: not a vintage store (no manifest.json); "
                                     f"create one with 'vintage-harness vintages init {printable_path(self.path)}'")

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
        FileAccessError
            When the directory or a file cannot be created (permissions, full disk).
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
        try:
            (p / "log").mkdir(parents=True, exist_ok=True)  # mode 0o777 & ~umask
        except OSError as exc:
            raise _access_error(p / "log", "create directory", exc) from None
        # The lock file exists from the start, so a writer never adds a file to the store
        # merely by trying (a refused append leaves every file byte-identical).
        atomic_write_bytes(p / ".lock", b"")
        manifest = {"format": FORMAT, "created": _now(), "variables": {}, "batches": [], "audit": [],
                    "metadata_audit": []}
        atomic_write_bytes(p / "manifest.json", _dump(_seal(manifest, manifest["created"])))
        return cls(p)

    def _manifest_unchecked(self) -> dict:
        f = self.path / "manifest.json"
        try:
            data = f.read_bytes()
        except FileNotFoundError:
            raise StoreNotFoundError(f"{printable_path(self.path)}: not a vintage store (no manifest.json)") from None
        except OSError as exc:
            raise _access_error(f, "read", exc) from None
        return _parse_manifest(data, printable_path(f))

    def manifest(self) -> dict:
        """The manifest as last committed, verified (a fresh read: readers see a consistent snapshot).

        Raises
        ------
        StoreCorruptError
            When the manifest cannot be read, has another format, fails its checksum or batch
            chain, or lists a path outside ``log/``; the message names the manifest and the
            first problem (:meth:`verify` lists them all).
        """
        m = self._manifest_unchecked()
        problems = manifest_problems(m)
        if problems:
            more = f" (and {len(problems) - 1} more; see 'vintage-harness vintages verify')" if len(problems) > 1 else ""
            raise StoreCorruptError(f"{printable_path(self.path / 'manifest.json')}: {problems[0]}{more}")
        return m

    def format_note(self, m: dict | None = None) -> str | None:
        """A note for people when the store has an older format (None for the current one)."""
        m = self.manifest() if m is None else m
        if m.get("format") == FORMAT:
            return None
        return (f"store format {m.get('format')!r} (written by an earlier version): batch checksums are "
                f"verified, but the manifest has no checksum and no batch chain; the next write "
                f"(ingest, describe) upgrades it to {FORMAT!r}")

    @property
    def variables(self) -> dict[str, dict]:
        """Per-variable metadata: ``{name: {"freq", "units", "description"[, "transform_hint"]}}``."""
        return self.manifest()["variables"]

    def checksum(self) -> str:
        """A digest of the committed state (the batch checksums in order and the metadata)."""
        return _checksum(self.manifest())

    def verify(self) -> list[str]:
        """Check the manifest and every listed file completely; return the problems (empty = sound).

        Checks: the manifest's checksum, batch chain and structure; every listed file exists, is
        a regular file under ``log/``, has its recorded SHA-256 (always re-hashed, whatever was
        remembered), decodes with the log's schema, holds the recorded number of rows, numbers
        its rows with its batch, and holds only variables of the manifest with period labels of
        their frequency. Files the manifest does not list (left by an interrupted write) are not
        problems: they were never committed (see :meth:`orphans`, :meth:`cleanup`).
        """
        try:
            m = self._manifest_unchecked()
        except StoreCorruptError as exc:
            return [str(exc)]
        problems = manifest_problems(m)
        if not isinstance(m.get("batches"), list) or not isinstance(m.get("variables"), dict):
            return problems
        freq_of_var = {k: v.get("freq") for k, v in m["variables"].items() if isinstance(v, dict)}
        for b in m["batches"]:
            if not isinstance(b, dict) or not isinstance(b.get("file"), str) or not _BATCH_NAME.match(b["file"]):
                continue  # reported above; never follow such a path
            try:
                data = _open_batch(self.path, b, use_cache=False)
                t = _decode(self.path, b, data)
            except (StoreCorruptError, FileAccessError) as exc:
                problems.append(str(exc).replace(f"{printable_path(self.path)}/", "", 1))
                continue
            rel = b["file"]
            if t.num_rows and (pc.min(t["batch"]).as_py() != b["seq"] or pc.max(t["batch"]).as_py() != b["seq"]):
                problems.append(f"{rel}: rows numbered with another batch than {b['seq']}")
            for var in pc.unique(t["variable"]).to_pylist():
                if var not in freq_of_var:
                    problems.append(f"{rel}: variable {var!r} is not in the manifest")
                    continue
                labels = pc.unique(t.filter(pc.equal(t["variable"], var))["period"]).to_numpy(zero_copy_only=False)
                _, got = parse_periods(labels.astype(object))
                n_bad = int((got != freq_of_var[var]).sum())
                if n_bad:
                    example = labels[np.flatnonzero(got != freq_of_var[var])[0]]
                    problems.append(f"{rel}: {n_bad} period label(s) of {var!r} are not valid for frequency "
                                    f"{freq_of_var[var]!r}, e.g. {example!r}")
        return problems

    def orphans(self) -> list[str]:
        """Files the manifest does not list: temporary files, unlisted batch files, anything else.

        Paths are relative to the store, sorted. Only temporary files and unlisted batch files
        can be left by an interrupted write; :meth:`cleanup` removes those and leaves the rest.
        """
        try:
            batches = self._manifest_unchecked().get("batches", [])
            listed = {b.get("file") for b in batches if isinstance(b, dict)} if isinstance(batches, list) else set()
        except StoreCorruptError:
            listed = set()
        found = []
        log_dir = self.path / "log"
        if log_dir.is_dir():
            found += [f"log/{f.name}" for f in log_dir.iterdir() if f"log/{f.name}" not in listed]
        found += [f.name for f in self.path.iterdir() if f.name not in ("manifest.json", ".lock", "log")]
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

        Raises
        ------
        StoreCorruptError
            When the manifest or a batch file fails its checksum (the message names the file).
        """
        m = self.manifest()
        return _read_log(self.path, m, with_superseded=with_superseded, check_labels=True)

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
        log = _read_log(self.path, m, with_superseded=False, variables=names, check_labels=True)
        return Cube.from_log(log, m["variables"], variables=names, checksum=_checksum(m))

    def export(self, out: str | os.PathLike, *, fmt: str = "csv", with_superseded: bool = False) -> int:
        """Write the release log as a long table (variable, period, release, value, batch), atomically.

        Parameters
        ----------
        out : path-like
            The output file (replaced atomically; never left half-written).
        fmt : {"csv", "parquet"}
        with_superseded : bool
            Include superseded values (the audit view).

        Returns
        -------
        int
            Rows written.

        Raises
        ------
        ValueError
            For another ``fmt``.
        FileAccessError
            When ``out`` is a directory or cannot be written (the message names it).
        """
        if fmt not in ("csv", "parquet"):
            raise ValueError(f"unknown export format {fmt!r}; expected one of ['csv', 'parquet']")
        log = self.read_log(with_superseded=with_superseded)
        log["release"] = log["release"].dt.strftime("%Y-%m-%d")
        with atomic_writer(out) as fh:
            if fmt == "csv":
                text = io.TextIOWrapper(fh, encoding="utf-8", newline="")
                log.to_csv(text, index=False, lineterminator="\n")
                text.flush()
                text.detach()
            else:
                log.to_parquet(fh, index=False)
        return len(log)

    # ----------------------------------------------------------------- writing
    @contextmanager
    def _lock(self) -> Iterator[None]:
        """Hold the writer's lock; raise StoreLockedError at once if another writer has it."""
        f = self.path / ".lock"
        try:
            # Created in place if missing (never replaced: see the module docstring).
            fd = os.open(f, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o666)
        except OSError as exc:
            raise _access_error(f, "open the writer's lock", exc) from None
        try:
            try:
                # flock locks belong to the open file description, so a second open in this
                # process (another thread) is refused as well as another process.
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError as exc:
                raise StoreLockedError(f"{printable_path(self.path)}: another writer holds the store's lock "
                                       f"({printable_path(f)}); try again when it has finished") from exc
            yield
        finally:
            os.close(fd)  # closing releases the lock, also when the process dies

    def _commit(self, m: dict, now: str) -> None:
        atomic_write_bytes(self.path / "manifest.json", _dump(_seal(m, now)))

    def describe(self, name: str, *, units: str | None = None, description: str | None = None,
                 transform_hint: str | None = None, reason: str | None = None,
                 _crash_hook: Callable[[str], None] | None = None) -> list[dict]:
        """Change a variable's units, description or transform hint, with an audit record.

        Each changed field adds ``{"time", "variable", "field", "old", "new", "reason"}`` to the
        manifest's ``metadata_audit``. Fields given with their current value change nothing;
        when nothing changes nothing is written. The frequency never changes.

        Parameters
        ----------
        name : str
            A variable of the store.
        units, description : str, optional
        transform_hint : str, optional
            The transformation that makes the series stationary (e.g. ``dlog_ann``), used as the
            default of ``vintage-harness vintages revisions``; ``""`` removes it. One of
            :func:`vintages.transforms.transform_names`.
        reason : str, optional
            Why, kept in the audit records.

        Returns
        -------
        list of dict
            The audit records written (empty when nothing changed).

        Raises
        ------
        KeyError
            When ``name`` is not a variable of the store.
        ValueError
            When ``transform_hint`` is not a known transformation.
        StoreLockedError
            When another writer holds the lock.
        """
        given = {"units": units, "description": description, "transform_hint": transform_hint}
        if transform_hint:
            from vintages.transforms import transform_names

            if transform_hint not in transform_names():
                raise ValueError(f"unknown transform hint {transform_hint!r}; expected one of "
                                 f"{transform_names()} (or '' to remove it)")
        with self._lock():
            m = self.manifest()
            if name not in m["variables"]:
                raise UnknownNameError(f"unknown variable {name!r}; known: {sorted(m['variables'])}")
            meta = m["variables"][name]
            now = _now()
            records = []
            for fld, new in given.items():
                if new is None:
                    continue
                new = str(new)
                old = meta.get(fld, "")
                if new == old:
                    continue
                records.append({"time": now, "variable": name, "field": fld, "old": old, "new": new,
                                "reason": reason or "metadata changed on request"})
                if fld == "transform_hint" and new == "":
                    meta.pop(fld, None)
                else:
                    meta[fld] = new
            if not records:
                return []
            m.setdefault("metadata_audit", []).extend(records)
            if _crash_hook:
                _crash_hook("before-manifest")
            self._commit(m, now)
            if _crash_hook:
                _crash_hook("after-manifest")
            return records

    def set_metadata(self, name: str, *, units: str | None = None, description: str | None = None) -> None:
        """Update a known variable's units or description (see :meth:`describe`, which this calls)."""
        self.describe(name, units=units, description=description)

    def cleanup(self, *, apply: bool = False) -> CleanupResult:
        """List (and with ``apply`` remove) the files interrupted writes left in the store.

        Only temporary files (``.tmp-*`` in the store or in ``log/``) and batch files in
        ``log/`` that the manifest does not list are candidates; a listed file is never
        removed, and anything else (not written by the store) is reported in ``kept``. Takes
        the writer's lock, so no write is in progress while it looks.

        Raises
        ------
        StoreLockedError
            When another writer holds the lock.
        """
        with self._lock():
            m = self.manifest()
            listed = {b["file"] for b in m["batches"]}
            removable, kept = [], []
            for rel in self.orphans():
                name = rel.rsplit("/", 1)[-1]
                ours = name.startswith(_TMP_PREFIX) and (self.path / rel).is_file()
                ours |= rel.startswith("log/") and _BATCH_NAME.match(rel) is not None
                (removable if ours and rel not in listed else kept).append(rel)
            removed = []
            if apply:
                for rel in removable:
                    try:
                        (self.path / rel).unlink()
                    except FileNotFoundError:
                        continue
                    except OSError as exc:
                        raise _access_error(self.path / rel, "remove", exc) from None
                    removed.append(rel)
                if removed:
                    for d in (self.path / "log", self.path):
                        try:
                            _fsync_dir(d)
                        except OSError as exc:
                            raise _access_error(d, "sync directory", exc) from None
            return CleanupResult(tuple(removable), tuple(removed), tuple(kept))

    def append(self, releases: pd.DataFrame, variables: dict[str, dict] | None = None, *,
               supersede: bool = False, source: str | None = None, reason: str | None = None,
               allow_early: bool = False, allow_future: bool = False, today=None,
               _crash_hook: Callable[[str], None] | None = None) -> AppendResult:
        """Append a validated batch of releases atomically (one batch of :meth:`append_many`).

        Parameters
        ----------
        releases : DataFrame
            Columns ``variable`` (str), ``period`` (label or Period), ``release`` (date),
            ``value`` (float); e.g. the result of :func:`vintages.ingest.read_releases`.
        variables : dict, optional
            Metadata for new variables: ``{name: {"freq": "Q"|"M", "units": ..., "description": ...}}``.
            The frequency of a new variable is inferred from its period labels when not given;
            a frequency given for a known variable must match the store's, and so must units
            and descriptions (they change only through :meth:`describe`).
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
        allow_future : bool
            Accept release dates more than a year after ``today``.
        today : date-like, optional
            The ingest day (default: today's date).

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
        MetadataConflictError
            When ``variables`` gives a known variable other units or another description.
        StoreLockedError
            When another writer holds the lock.
        """
        return self.append_many([(releases, variables, source)], supersede=supersede, reason=reason,
                                allow_early=allow_early, allow_future=allow_future, today=today,
                                _crash_hook=_crash_hook)[0]

    def append_many(self, items: Sequence, *, supersede: bool = False, reason: str | None = None,
                    allow_early: bool = False, allow_future: bool = False, today=None,
                    _crash_hook: Callable[[str], None] | None = None) -> list[AppendResult]:
        """Append several batches all-or-nothing: every one is validated, then one commit.

        Each batch is validated against the store *and* the batches before it (a new
        variable's frequency, values of the same cell, metadata), so a later batch that
        contradicts an earlier one is refused before anything is written. Each batch with new
        rows gets its own batch file; the manifest, which lists them all, is written once.

        Parameters
        ----------
        items : sequence
            ``(releases, variables, source)`` tuples (``variables`` and ``source`` as in
            :meth:`append`, may be None) or bare DataFrames.
        supersede, reason, allow_early, allow_future, today
            As in :meth:`append`, for every batch.

        Returns
        -------
        list of AppendResult
            One per item, in order.

        Raises
        ------
        InputError, ReleaseConflictError, MetadataConflictError, StoreLockedError
            As in :meth:`append`; the message names the batch (file) at fault, and the store is
            byte-identical to before.
        """
        from vintages.ingest import validate_table

        parsed = [_as_item(x) for x in items]
        if not parsed:
            return []
        with self._lock():
            m = self.manifest()
            stored = m["variables"]
            known = {k: dict(v) for k, v in stored.items()}
            plans = []
            for df, meta, source in parsed:
                batch = validate_table(df, known=known, new_meta=meta, source=source, allow_early=allow_early,
                                       allow_future=allow_future, today=today)
                src = str(batch.attrs["source"])
                _check_metadata(meta, known, src)
                new_vars, warnings = {}, []
                for name, freq in sorted(batch.attrs["freqs"].items()):
                    if name in known:
                        continue
                    info = {"freq": freq, "units": "", "description": ""}
                    info.update({k: str(v) for k, v in (meta.get(name) or {}).items()
                                 if k in ("units", "description") and v is not None})
                    new_vars[name] = info
                    known[name] = dict(info, _why=f"as in {src}, earlier in this ingest")
                    if not info["units"]:
                        warnings.append(f"new variable {name!r} has no units; record them with describe "
                                        f"(vintage-harness vintages describe {printable_path(self.path)} {name} --units ...)")
                plans.append((batch, src, new_vars, tuple(warnings)))

            # Values in force: the store's, for the variables these batches touch, then each
            # batch's own rows for the batches after it.
            touched = sorted(set().union(*(set(p[0].attrs["freqs"]) for p in plans)) & set(stored))
            in_force = (_read_log(self.path, m, with_superseded=False, variables=touched,
                                  columns=["variable", "period", "release", "value"])
                        if touched else pd.DataFrame({"variable": pd.Series([], dtype=object),
                                                      "period": pd.Series([], dtype=object),
                                                      "release": pd.Series([], dtype="datetime64[s]"),
                                                      "value": pd.Series([], dtype=np.float64)}))
            in_force["_from"] = ""
            seq = len(m["batches"])
            now = _now()
            results, writes, entries, audit, all_new = [], [], [], [], {}
            for k, (batch, src, new_vars, warnings) in enumerate(plans):
                old_value, old_from = _lookup(batch, in_force)
                present = ~np.isnan(old_value)
                same = present & (old_value == batch["value"].to_numpy())
                conflict = present & ~same
                if conflict.any() and not supersede:
                    i = int(np.argmax(conflict))
                    c = batch.iloc[i]
                    was = (f"stored {float(old_value[i])!r}" if not old_from[i]
                           else f"{float(old_value[i])!r} in {old_from[i]}, earlier in this ingest")
                    raise ReleaseConflictError(
                        f"{src}: {int(conflict.sum())} value(s) would change what was already published, "
                        f"e.g. {c['variable']} {c['period']} released {pd.Timestamp(c['release']).date()}: "
                        f"{was}, new {float(c['value'])!r}. A correction is a new release date; to replace "
                        "a published value on purpose pass supersede (--supersede); nothing was written")
                fresh = batch[~same]
                all_new.update(new_vars)
                if fresh.empty:
                    results.append(AppendResult(0, int(same.sum()), 0, None, warnings, src))
                    continue
                seq += 1
                data = _batch_bytes(fresh, seq)
                digest = hashlib.sha256(data).hexdigest()
                rel = f"log/{seq:06d}-{digest[:12]}.parquet"
                writes.append((rel, data))
                entries.append({"seq": seq, "file": rel, "sha256": digest, "rows": len(fresh), "source": src,
                                "created": now, "supersede": bool(conflict.any())})
                if conflict.any():
                    sup = batch[conflict]
                    audit.extend(
                        {"batch": seq, "time": now, "variable": v, "period": p, "release": str(r),
                         "old": float(o), "new": float(x), "reason": reason or "superseded on request"}
                        for v, p, r, o, x in zip(sup["variable"].tolist(), sup["period"].tolist(),
                                                 sup["release"].to_numpy().astype("datetime64[D]"),
                                                 old_value[conflict], sup["value"].tolist(), strict=True))
                if k < len(plans) - 1:
                    add = fresh[_KEY + ["value"]].assign(_from=src)
                    in_force = pd.concat([in_force, add], ignore_index=True).drop_duplicates(_KEY, keep="last")
                results.append(AppendResult(len(fresh), int(same.sum()), int(conflict.sum()), rel, warnings,
                                            src))
            if not writes:
                return results  # nothing new anywhere: every file stays byte-identical
            for k, (rel, data) in enumerate(writes):
                if _crash_hook:
                    _crash_hook("before-batch" if k == 0 else "between-batches")
                atomic_write_bytes(self.path / rel, data)
            if _crash_hook:
                _crash_hook("before-manifest")
            m["variables"].update(all_new)
            m["batches"].extend(entries)
            m["audit"].extend(audit)
            self._commit(m, now)
            if _crash_hook:
                _crash_hook("after-manifest")
            return results

    def info(self) -> pd.DataFrame:
        """One row per variable: frequency, units, periods, releases, first/last period and release."""
        m = self.manifest()
        # Superseded rows share their cell's key, so counts and ranges need no de-duplication.
        log = _read_log(self.path, m, with_superseded=True, columns=["variable", "period", "release"],
                        check_labels=True)
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
            row["transform_hint"] = meta.get("transform_hint", "")
            rows.append(row)
        return pd.DataFrame(rows)


def _check_metadata(meta: dict, known: dict, src: str) -> None:
    """Refuse units or descriptions that differ from a known variable's (describe changes them)."""
    for name in sorted(meta or {}):
        if name not in known:
            continue
        for fld in ("units", "description"):
            new = (meta.get(name) or {}).get(fld)
            if new is None:
                continue
            old = known[name].get(fld, "")
            if str(new) != old:
                where = known[name].get("_why", "as recorded in the store")
                raise MetadataConflictError(
                    f"{src}: variable {name!r} has {fld} {old!r} ({where}), this ingest gives {str(new)!r}; "
                    f"metadata change only through describe, which keeps an audit record "
                    f"(vintage-harness vintages describe STORE {name} --{fld} ...); nothing was written")


def clear_verified_cache() -> None:
    """Forget which batch files this process has verified (the next read hashes them again)."""
    _VERIFIED.clear()


def open_store(path) -> VintageStore:
    """Open an existing store (raises :class:`StoreNotFoundError` when there is none)."""
    return VintageStore(path)


__all__ = ["atomic_write_bytes", "atomic_writer", "VintageStore", "AppendResult", "CleanupResult",
           "open_store", "sha256_file", "sha256_matches", "InputError", "FORMAT", "READ_FORMATS", "clear_verified_cache"]
