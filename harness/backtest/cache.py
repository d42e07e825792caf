"""The task cache: content-addressed task results, information sets and release indexes, shared by runs.

Where it lives (:func:`harness.spec.sections.cache_location`): ``[run] cache`` in the spec, else
the ``HARNESS_CACHE`` environment variable, else ``.harness-cache`` beside the store (a sibling
of the store directory, never inside it: the store holds releases only). Every run of any spec
on that store shares it, so a new run directory (``--out``) reuses every finished task.

Layout::

    CACHE/CACHEDIR.TAG                 marks a cache directory (backup tools skip it)
    CACHE/.lock                        shared by runs while they use the cache, exclusive for clean
    CACHE/tasks/ab/<key>.parquet       one finished task: draws in draw order (joint paths), float32
    CACHE/tasks/ab/<key>.fail.json     one failed task: error and traceback
    CACHE/plans/<uid>/<digest>.pkl     origins, information sets and targets of one plan (per user)
    CACHE/cubes/<digest>.npz           the release index of one store state (``Cube.save``)
    CACHE/runs/<id>.json               one run directory's registration: the entries it uses

Every file is written atomically (temporary ``.tmp-*`` name, fsync, rename) and named by what it
holds, so concurrent runs can share the cache: two workers writing one key write the same bytes.

Which entries are in use: each run registers (``runs/<id>.json``, one file per run directory,
rewritten at every run of it) the task keys, plan and cube digests it reads, *before* it looks
anything up, and holds the shared lock while it runs. :meth:`TaskCache.clean` takes the lock
exclusively (so it never runs beside a run), drops registrations whose run directory is gone or
now uses another cache, and removes entries no remaining registration names, plus temporary
files left by killed writers, here and in the registered run directories (those not locked by a
run at that moment).

Plans are pickles: loading one runs code, so each user's plans live in a directory of their own
(mode 0700) and a plan is read only when that directory and the file belong to the current user
and the directory is closed to everyone else (otherwise the plan is rebuilt).
"""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import json
import os
import re
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

from harness.backtest.errors import CacheBusyError, RunLockedError

FORMAT = "task-cache/1"
TMP_PREFIX = ".tmp-"  # the temporary-file prefix of every atomic write (vintages.atomic_writer)
_TAG = ("Signature: 8a477f597d28d172789f06886806bc55\n"
        "# This file marks a cache directory of vintage-harness (task results, information sets).\n"
        "# See https://bford.info/cachedir/ for the convention.\n")
#: files of a run directory that belong to one committed manifest (others are stale)
RUN_FILE_PREFIXES = ("ledger-", "provenance-", "diagnostics-")


def _atomic_write(path: Path, data: bytes) -> None:
    from vintages import atomic_write_bytes

    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_bytes(path, data)


def run_id(run_dir: Path) -> str:
    """The registration name of a run directory (digest of its absolute path)."""
    return hashlib.sha256(str(Path(run_dir).resolve()).encode()).hexdigest()[:16]


@contextlib.contextmanager
def flock(path: Path, *, exclusive: bool, block: bool, busy) -> Iterator[None]:
    """Hold a ``flock`` on ``path`` (created if missing); ``busy()`` gives the error when not blocking."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o666)
    try:
        mode = fcntl.LOCK_EX if exclusive else fcntl.LOCK_SH
        try:
            fcntl.flock(fd, mode if block else mode | fcntl.LOCK_NB)
        except BlockingIOError:
            raise busy() from None
        yield
    finally:
        os.close(fd)  # releases the lock, also when the process dies


def run_dir_lock(run_dir: Path):
    """The exclusive lock a run holds on its run directory (a second run there fails at once)."""
    lock = Path(run_dir) / ".lock"
    return flock(lock, exclusive=True, block=False, busy=lambda: RunLockedError(
        f"{run_dir}: another run is writing this run directory (lock {lock}); wait for it to finish "
        "or choose another --out"))


@dataclass
class CleanResult:
    """What :meth:`TaskCache.clean` found (paths relative to the cache or absolute for run files)."""

    cache: Path
    removable: list[tuple[str, int]] = field(default_factory=list)  # (path, bytes)
    removed: list[str] = field(default_factory=list)
    live_runs: list[str] = field(default_factory=list)
    stale_runs: list[str] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)

    def summary(self) -> str:
        size = sum(b for _, b in self.removable) / 1e6
        verb = "removed" if self.removed else "would remove"
        return (f"cache {self.cache}: {len(self.live_runs)} run(s) registered, {len(self.stale_runs)} gone; "
                f"{verb} {len(self.removable)} file(s), {size:.1f} MB"
                + ("" if self.removed or not self.removable else " (dry run: add --apply)"))


class TaskCache:
    """One cache directory (see the module docstring); cheap to create, workers make their own."""

    def __init__(self, root: str | os.PathLike):
        self.root = Path(root)

    def __repr__(self) -> str:
        return f"TaskCache({str(self.root)!r})"

    # ------------------------------------------------------------------ paths
    def task_path(self, key: str) -> Path:
        return self.root / "tasks" / key[:2] / f"{key}.parquet"

    def failure_path(self, key: str) -> Path:
        return self.root / "tasks" / key[:2] / f"{key}.fail.json"

    def plan_dir(self) -> Path:
        return self.root / "plans" / str(os.getuid())

    def plan_path(self, digest: str) -> Path:
        return self.plan_dir() / f"{digest}.pkl"

    def cube_path(self, digest: str) -> Path:
        return self.root / "cubes" / f"{digest}.npz"

    def registration_path(self, run_dir: Path) -> Path:
        return self.root / "runs" / f"{run_id(run_dir)}.json"

    def has(self, key: str) -> bool:
        return self.task_path(key).is_file()

    def ensure(self) -> TaskCache:
        """Create the directory and its tag; refuse a path that is not a directory."""
        try:
            self.root.mkdir(parents=True, exist_ok=True)
            tag = self.root / "CACHEDIR.TAG"
            if not tag.exists():
                _atomic_write(tag, _TAG.encode())
        except OSError as exc:
            from harness.errors import RunError

            raise RunError(f"{self.root}: cannot use this task cache ({exc.strerror or exc}); set "
                           "[run] cache in the spec or HARNESS_CACHE to a writable directory") from None
        return self

    # ------------------------------------------------------------------ locks
    def using(self):
        """The shared lock a run holds while it reads or writes entries (waits for a clean to end)."""
        return flock(self.root / ".lock", exclusive=False, block=True, busy=lambda: None)

    def exclusive(self):
        """The exclusive lock of :meth:`clean`; :class:`CacheBusyError` at once while a run holds it."""
        return flock(self.root / ".lock", exclusive=True, block=False, busy=lambda: CacheBusyError(
            f"{self.root}: a run is using this cache (lock {self.root / '.lock'}); clean when no run is "
            "going"))

    # ------------------------------------------------------------------ tasks
    def write_task(self, key: str, draws, target_periods: list[str], meta: dict) -> Path:
        """Persist one task's draws (DataArray ``(draw, variable, horizon)``) in draw order, atomically.

        ``meta`` (JSON-able: model, origin, seed key, timing, provenance, diagnostics) goes in the
        Parquet file's metadata.
        """
        import numpy as np
        import pyarrow as pa

        from harness.backtest import codec

        arr = np.asarray(draws.transpose("variable", "horizon", "draw").values, dtype=np.float32)
        nv, nh, nd = arr.shape
        variables = [str(v) for v in draws["variable"].values]
        horizons = np.asarray([int(h) for h in draws["horizon"].values], dtype=np.int16)
        table = pa.table({
            "variable": pa.array(np.repeat(variables, nh)),
            "horizon": pa.array(np.tile(horizons, nv)),
            "target_period": pa.array([str(p) for p in target_periods] * nv, pa.string()),
            "draws": codec.encode(arr.reshape(nv * nh, nd), "joint"),
        })
        table = table.replace_schema_metadata({"task": json.dumps(meta, default=str), "format": FORMAT})
        sink = pa.BufferOutputStream()
        codec.write_table(table, sink, "joint")
        path = self.task_path(key)
        _atomic_write(path, sink.getvalue().to_pybytes())
        return path

    def read_task(self, key: str):
        """``(table, meta)`` of a finished task (``draws`` float32 in draw order)."""
        import pyarrow.parquet as pq

        t = pq.read_table(self.task_path(key))
        return t, json.loads(t.schema.metadata[b"task"])

    def write_failure(self, key: str, record: dict) -> Path:
        path = self.failure_path(key)
        _atomic_write(path, (json.dumps(record, indent=1, default=str) + "\n").encode())
        return path

    def read_failure(self, key: str) -> dict:
        return json.loads(self.failure_path(key).read_text())

    # ------------------------------------------------------------------ registrations
    def register(self, run_dir: Path, *, keys=(), plans=(), cubes=(), pools=()) -> Path:
        """Record the entries ``run_dir`` uses (replacing its previous registration).

        ``keys``: task keys, the models' and the pools' per-origin tasks alike; ``pools``: the
        pools' keys (their weights and meta files under ``pools/``).
        """
        rec = {"format": FORMAT, "run_dir": str(Path(run_dir).resolve()), "written": time.strftime("%Y-%m-%dT%H:%M:%S"),
               "keys": sorted(set(keys)), "plans": sorted(set(plans)), "cubes": sorted(set(cubes)),
               "pools": sorted(set(pools))}
        path = self.registration_path(run_dir)
        _atomic_write(path, json.dumps(rec).encode())
        return path

    def registrations(self) -> list[tuple[Path, dict | None]]:
        """Every registration file with its content (None when unreadable)."""
        out = []
        d = self.root / "runs"
        for p in sorted(d.glob("*.json")) if d.is_dir() else []:
            try:
                out.append((p, json.loads(p.read_text())))
            except (OSError, ValueError):
                out.append((p, None))
        return out

    def donors(self, run_dir: Path, keys, limit: int = 3) -> list[tuple[Path, object]]:
        """Other live run directories of this cache whose registrations share most ``keys`` (best first).

        Returned with their manifests; an unreadable manifest or one of another cache is skipped.
        """
        from harness.backtest.manifest import RunManifest
        from harness.errors import RunError

        here = Path(run_dir).resolve()
        want = set(keys)
        scored = []
        for _, rec in self.registrations():
            if not rec or Path(rec.get("run_dir", "")) == here or not self._is_live(rec):
                continue
            n = len(want.intersection(rec.get("keys", ())))
            if n:
                scored.append((n, rec["run_dir"]))
        out = []
        for _, d in sorted(scored, reverse=True):
            try:
                man = RunManifest.read(d)
            except RunError:
                continue
            if man.cache and Path(man.cache).resolve() == self.root.resolve():
                out.append((Path(d), man))
            if len(out) >= limit:
                break
        return out

    def _is_live(self, rec: dict | None) -> bool:
        """A registration still counts: its run directory exists and does not use another cache."""
        if not rec or "run_dir" not in rec:
            return False
        run_dir = Path(rec["run_dir"])
        if not run_dir.is_dir():
            return False
        try:
            man = json.loads((run_dir / "run.json").read_text())
        except (OSError, ValueError):
            return True  # a run that never finished: keep what it computed, it may resume
        other = man.get("cache") if isinstance(man, dict) else None
        return not other or Path(other).resolve() == self.root.resolve()

    # ------------------------------------------------------------------ clean
    def clean(self, *, apply: bool = False) -> CleanResult:
        """List (and with ``apply`` remove) entries no registered run uses and temporary files.

        Takes the exclusive lock: raises :class:`CacheBusyError` while a run uses the cache.
        Removed: task results, failures, plans and cubes no live registration names; the
        registrations of run directories that are gone (or now use another cache); ``.tmp-*``
        files anywhere in the cache; in each live run directory not locked by a run, ``.tmp-*``
        files and ledger, provenance and diagnostics files its ``run.json`` does not name.
        """
        res = CleanResult(self.root)
        if not self.root.is_dir():
            return res
        with self.exclusive():
            live_keys: set[str] = set()
            live_plans: set[str] = set()
            live_cubes: set[str] = set()
            live_pools: set[str] = set()
            live_dirs = []
            for path, rec in self.registrations():
                if self._is_live(rec):
                    live_keys.update(rec.get("keys", ()))
                    live_plans.update(rec.get("plans", ()))
                    live_cubes.update(rec.get("cubes", ()))
                    live_pools.update(rec.get("pools", ()))
                    live_dirs.append(Path(rec["run_dir"]))
                    res.live_runs.append(rec["run_dir"])
                else:
                    res.stale_runs.append(rec.get("run_dir", path.name) if rec else path.name)
                    res.removable.append((str(path.relative_to(self.root)), _size(path)))
            for f in self._walk():
                rel = f.relative_to(self.root)
                name = f.name
                if name.startswith(TMP_PREFIX):
                    res.removable.append((str(rel), _size(f)))
                elif rel.parts[0] == "tasks":
                    key = name.split(".", 1)[0]
                    if key not in live_keys:
                        res.removable.append((str(rel), _size(f)))
                elif rel.parts[0] == "plans" and f.suffix == ".pkl" and f.stem not in live_plans:
                    res.removable.append((str(rel), _size(f)))
                elif rel.parts[0] == "cubes" and f.suffix == ".npz" and f.stem not in live_cubes:
                    res.removable.append((str(rel), _size(f)))
                elif rel.parts[0] == "pools" and f.suffix in (".parquet", ".json") and f.stem not in live_pools:
                    res.removable.append((str(rel), _size(f)))
            for run_dir in live_dirs:
                try:
                    with run_dir_lock(run_dir):
                        res.removable.extend((str(p), _size(p)) for p in stale_run_files(run_dir, self.root))
                except RunLockedError:
                    res.skipped.append(f"{run_dir}: a run is writing it")
                except OSError as exc:
                    res.skipped.append(f"{run_dir}: {exc.strerror or exc}")
            if apply:
                for rel, _ in res.removable:
                    p = Path(rel) if os.path.isabs(rel) else self.root / rel
                    try:
                        p.unlink()
                    except FileNotFoundError:
                        continue
                    res.removed.append(rel)
        return res

    def _walk(self) -> Iterator[Path]:
        for sub in ("tasks", "plans", "cubes", "pools", "runs", "."):
            d = self.root / sub
            if not d.is_dir():
                continue
            if sub == ".":
                yield from (f for f in d.iterdir() if f.is_file() and f.name.startswith(TMP_PREFIX))
            elif sub == "tasks":
                for shard in d.iterdir():
                    if shard.is_dir():
                        yield from (f for f in shard.iterdir() if f.is_file())
                    elif shard.name.startswith(TMP_PREFIX):
                        yield shard
            elif sub == "runs":
                yield from (f for f in d.iterdir() if f.name.startswith(TMP_PREFIX))
            elif sub == "plans":
                for user in d.iterdir():
                    if user.is_dir():
                        with contextlib.suppress(OSError):  # another user's: not ours to list
                            yield from (f for f in user.iterdir() if f.is_file())
            else:
                yield from (f for f in d.iterdir() if f.is_file())

    def info(self) -> dict:
        """Counts and sizes of the entries, and the registered run directories."""
        out = {"cache": str(self.root), "tasks": 0, "failures": 0, "plans": 0, "cubes": 0, "pools": 0,
               "bytes": 0, "runs": [], "gone": []}
        for f in self._walk():
            out["bytes"] += _size(f)
            rel = f.relative_to(self.root)
            if f.name.startswith(TMP_PREFIX):
                continue
            if rel.parts[0] == "tasks":
                out["failures" if f.name.endswith(".fail.json") else "tasks"] += 1
            elif rel.parts[0] in ("plans", "cubes"):
                out[rel.parts[0]] += 1
            elif rel.parts[0] == "pools" and f.suffix == ".json":
                out["pools"] += 1
        for _, rec in self.registrations():
            (out["runs"] if self._is_live(rec) else out["gone"]).append((rec or {}).get("run_dir", "?"))
        return out


_LEGACY_TASK = re.compile(r"^[0-9a-f]{32}\.(parquet|fail\.json)$")


def stale_run_files(run_dir: Path, cache_root: Path | None = None) -> list[Path]:
    """Temporary files and ledger/provenance/diagnostics files ``run.json`` does not name.

    Also the task files of the in-run cache (``RUN/tasks/``) earlier versions kept, unless that
    folder is the cache in use (``cache_root``) or the one the run's manifest names.
    """
    run_dir = Path(run_dir)
    named: set[str] | None = set()  # None: a manifest exists but cannot be read (touch nothing)
    man = None
    try:
        man = json.loads((run_dir / "run.json").read_text())
        named = {man.get(k) for k in ("ledger", "provenance", "diagnostics_file") if man.get(k)}
    except FileNotFoundError:
        pass  # no manifest: nothing names a ledger file yet
    except (OSError, ValueError):
        named = None
    out = []
    for f in run_dir.iterdir():
        if not f.is_file():
            continue
        if f.name.startswith(TMP_PREFIX):
            out.append(f)
        elif (named is not None and f.name.startswith(RUN_FILE_PREFIXES) and f.suffix == ".parquet"
              and f.name not in named):
            out.append(f)
    legacy = run_dir / "tasks"
    if named is not None and legacy.is_dir():
        in_use = {Path(cache_root).resolve()} if cache_root is not None else set()
        if isinstance(man, dict) and man.get("cache"):
            in_use.add(Path(man["cache"]).resolve())
        if legacy.resolve() not in in_use:
            out.extend(f for f in legacy.iterdir()
                       if f.is_file() and (_LEGACY_TASK.match(f.name) or f.name.startswith(TMP_PREFIX)))
    return sorted(out)


def _size(p: Path) -> int:
    try:
        return p.stat().st_size
    except OSError:
        return 0


def trusted_file(path: Path) -> bool:
    """A file this user owns in a directory this user owns and nobody else may enter (safe to unpickle)."""
    try:
        st, dst = path.stat(), path.parent.stat()
    except OSError:
        return False
    uid = os.getuid()
    return st.st_uid == uid and dst.st_uid == uid and not (dst.st_mode & 0o077)


def private_dir(path: Path) -> Path:
    """Create ``path`` (mode 0700) if missing and return it."""
    path.mkdir(parents=True, exist_ok=True, mode=0o700)
    return path
