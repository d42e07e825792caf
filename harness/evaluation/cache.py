"""A cache of evaluations: scoring a run again under the same truth reads the tables back.

The key hashes everything an evaluation depends on: the ledger (its content-addressed file and
the set of task keys), the store's checksum *now* (a new release can change a truth), the truth,
the incumbent, the spec's scoring section and seed, the test settings, and the code of the
scoring, testing and truth modules. Entries live in ``RUN/.evaluations/<key>/``, one Parquet
file per table, written atomically; ``meta.json`` is written last and marks the entry complete,
so a killed evaluation leaves no entry that could be read.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import time
from pathlib import Path
from typing import Any

import pandas as pd

#: entries kept per run directory: the most recently used (a new entry beyond it drops the oldest)
KEEP = 8
_TABLES = ("forecasts", "table", "relative", "tests", "mcs", "calibration", "fluctuation", "turning_points")
_CODE: dict[str, str] = {}
#: bumped when the layout of a cache entry changes
FORMAT = 1


def _code_digest() -> str:
    """Digest of the code an evaluation's numbers depend on (scores, tests, truths, this stage)."""
    if "all" not in _CODE:
        import harness
        import vintages

        roots = [Path(harness.__file__).parent / d for d in ("scores", "compare", "evaluation")]
        files = sorted(f for r in roots for f in r.glob("*.py"))
        files += [Path(vintages.__file__).parent / n for n in ("truths.py", "rows.py", "transforms.py",
                                                               "hac.py", "chronology.py")]
        h = hashlib.sha256()
        for f in files:
            if f.is_file():
                h.update(f.name.encode() + b"\0" + f.read_bytes())
        _CODE["all"] = h.hexdigest()
    return _CODE["all"]


def evaluation_key(manifest, store_checksum: str, **settings: Any) -> str:
    """The cache key of an evaluation of ``manifest``'s run under ``settings`` (JSON-able)."""
    payload = {"format": FORMAT, "ledger": manifest.ledger, "ledger_digest": manifest.ledger_digest,
               "store": store_checksum, "scoring": manifest.scoring.as_dict(), "seed": manifest.seed,
               "code": _code_digest(), **settings}
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()[:32]


def _entry(run_dir: Path, key: str) -> Path:
    return Path(run_dir) / ".evaluations" / key


def load(run_dir: Path, key: str, manifest):
    """The cached Evaluation under ``key``, or None."""
    from harness.evaluation.evaluator import Evaluation

    d = _entry(run_dir, key)
    meta_path = d / "meta.json"
    if not meta_path.is_file():
        return None
    try:
        meta = json.loads(meta_path.read_text())
        frames = {n: pd.read_parquet(d / f"{n}.parquet") for n in _TABLES}
    except (OSError, ValueError):
        return None  # a damaged entry is recomputed
    with contextlib.suppress(OSError):
        os.utime(meta_path)  # most recently used: kept by _prune
    for name, kinds in (meta.get("datetime_units") or {}).items():  # the units the evaluation had
        for c, unit in kinds.items():
            if c in frames[name]:
                frames[name][c] = frames[name][c].astype(unit)
    fc = frames["forecasts"]
    if "subperiods" in fc:
        fc["subperiods"] = fc["subperiods"].map(lambda s: s.split(";") if isinstance(s, str) and s else [])
    for name in ("table", "relative"):
        if "subperiod" in frames[name]:
            frames[name]["subperiod"] = pd.Categorical(frames[name]["subperiod"],
                                                       categories=meta["subperiod_categories"], ordered=True)
    reg = pd.Series(meta["regimes"]["values"], index=pd.PeriodIndex(meta["regimes"]["index"],
                                                                      freq=meta["regimes"]["freq"]),
                    name="regime")
    tp = frames["turning_points"]
    for c in ("peak", "trough"):
        if c in tp:
            tp[c] = pd.PeriodIndex(tp[c].astype("string").fillna("NaT"), freq=meta["turning_points_freq"])
    return Evaluation(Path(run_dir), meta["truth"], meta["benchmark"], fc, frames["table"], frames["relative"],
                      frames["tests"], frames["mcs"], frames["calibration"], frames["fluctuation"], reg,
                      meta["chronology_source"], tp, list(meta["subperiod_names"]), manifest)


def _freq_code(col: pd.Series) -> str:
    from vintages import freq_of

    return freq_of(col) or "Q"


def store(run_dir: Path, key: str, ev) -> None:
    """Write ``ev`` under ``key`` (each table atomically, then the completing ``meta.json``)."""
    from vintages import atomic_write_bytes

    d = _entry(run_dir, key)
    d.mkdir(parents=True, exist_ok=True)
    fc = ev.forecasts.assign(subperiods=ev.forecasts["subperiods"].map(";".join))
    tp = ev.turning_points.copy()
    freq = ""
    for c in ("peak", "trough"):
        if c in tp:
            freq = freq or _freq_code(tp[c])
            tp[c] = tp[c].astype(str)
    frames = {"forecasts": fc, "table": ev.table, "relative": ev.relative, "tests": ev.tests, "mcs": ev.mcs,
              "calibration": ev.calibration, "fluctuation": ev.fluctuation, "turning_points": tp}
    units = {name: {c: str(frame[c].dtype) for c in frame.columns
                    if pd.api.types.is_datetime64_any_dtype(frame[c].dtype)} for name, frame in frames.items()}
    for name, frame in frames.items():
        f = frame.copy()
        for c in f.columns:
            if isinstance(f[c].dtype, pd.CategoricalDtype):
                f[c] = f[c].astype(str)
        atomic_write_bytes(d / f"{name}.parquet", f.to_parquet(index=False))
    cats = (list(ev.table["subperiod"].cat.categories) if "subperiod" in ev.table
            and isinstance(ev.table["subperiod"].dtype, pd.CategoricalDtype) else list(ev.subperiod_names))
    reg = ev.regimes
    meta = {"truth": ev.truth, "benchmark": ev.benchmark, "chronology_source": ev.chronology_source,
            "subperiod_names": list(ev.subperiod_names), "subperiod_categories": cats,
            "regimes": {"index": [str(p) for p in reg.index], "values": [str(v) for v in reg.to_numpy()],
                        "freq": (reg.index.freqstr or "Q")[:1]},
            "turning_points_freq": freq or "Q", "datetime_units": units}
    atomic_write_bytes(d / "meta.json", (json.dumps(meta) + "\n").encode())
    _prune(Path(run_dir), keep=KEEP)


def _prune(run_dir: Path, keep: int) -> None:
    """Remove all but the ``keep`` most recently used entries (stale keys: older code, old stores)."""
    import shutil

    root = Path(run_dir) / ".evaluations"
    entries = []
    for d in root.iterdir() if root.is_dir() else ():
        m = d / "meta.json"
        if d.is_dir() and m.is_file():
            entries.append((m.stat().st_mtime, d))
        elif d.is_dir() and time.time() - d.stat().st_mtime > 3600:
            entries.append((0.0, d))  # an entry whose write was interrupted an hour ago or more
    for _, d in sorted(entries, reverse=True)[keep:]:
        shutil.rmtree(d, ignore_errors=True)


def load_extra(run_dir: Path, key: str, name: str, tables: tuple[str, ...]) -> dict | None:
    """Tables a later stage stored beside the evaluation ``key`` (:func:`store_extra`), or None."""
    d = _entry(run_dir, key)
    if not key or not (d / f"{name}.done").is_file():
        return None
    try:
        return {t: pd.read_parquet(d / f"{name}-{t}.parquet") for t in tables}
    except (OSError, ValueError):
        return None


def store_extra(run_dir: Path, key: str, name: str, frames: dict) -> None:
    """Keep a later stage's tables beside the evaluation ``key`` (each atomically, then a marker)."""
    from vintages import atomic_write_bytes

    d = _entry(run_dir, key)
    if not key or not (d / "meta.json").is_file():
        return
    for t, frame in frames.items():
        atomic_write_bytes(d / f"{name}-{t}.parquet", frame.to_parquet(index=False))
    atomic_write_bytes(d / f"{name}.done", b"")


def stage_key(**settings: Any) -> str:
    """A short digest of a later stage's settings and of its code (for :func:`store_extra` names)."""
    if "verdicts" not in _CODE:  # the verdict stage's code, read once per process like _code_digest
        import harness

        h = hashlib.sha256(_code_digest().encode())
        for f in sorted((Path(harness.__file__).parent / "verdicts").glob("*.py")):
            h.update(f.name.encode() + b"\0" + f.read_bytes())
        _CODE["verdicts"] = h.hexdigest()
    payload = json.dumps(settings, sort_keys=True, default=str) + _CODE["verdicts"]
    return hashlib.sha256(payload.encode()).hexdigest()[:16]
