"""The run manifest (``run.json``): one versioned type, written and read here only.

The manifest and the ledger form one unit: the manifest names the ledger and provenance files,
which are content-addressed (``ledger-<digest>.parquet``) and written before the manifest, so a
run killed at any moment leaves either the old manifest with its old ledger or the new pair.
Readers refuse a manifest of an unknown format, and a ledger that does not agree with its
manifest (naming both files).
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

from harness.errors import RunError
from harness.spec.sections import ScoringSection

FORMAT = "run-manifest/3"
#: formats this version reads (the first wave wrote no format field: refused with a clear note).
#: Format 3 added the draws' layout (the ledger's draws are sorted and delta-packed by default,
#: which a reader of format 2 would misread), the diagnostics table, the diagnostic warnings and
#: the task cache; a format-2 manifest reads with their defaults (plain float32 draws in draw
#: order, no diagnostics).
READABLE = ("run-manifest/2", FORMAT)
#: fields a format-2 manifest lacks, and their values for it
_ADDED_IN_3 = ("pools", "pool_warnings", "draws_layout", "diagnostics_file", "diagnostics_rows", "diagnostic_warnings", "cache")


@dataclass(frozen=True)
class RunManifest:
    """What a run was and what it produced.

    Attributes
    ----------
    format : str
        ``run-manifest/3`` (``run-manifest/2`` is read too).
    name, created, spec, spec_hash : str
        The run's name, creation time (ISO), the spec file and the digest of its content.
    store, store_checksum : str
        The store read and its checksum at planning time; ``store_batches`` its batch count.
    mode, policy, freq : str
        Information-set settings.
    seed, draws : int
    models : tuple of str
        Model labels in spec order; ``model_specs`` their types and parameters.
    origins : tuple of str
        ISO days; ``target_periods[i]`` the target period label per horizon at origin ``i``.
    targets : tuple of str
    horizons : tuple of int
    variables : dict
        Series specifications as written to the information sets.
    scoring : ScoringSection
        The spec's scoring section (benchmark, truths, sub-periods, test settings).
    backend : str
    jobs : int
    counts : dict
        ``total``, ``computed``, ``cached``, ``failed``.
    tasks, failures : tuple of dict
        One record per task; the failed ones with their error and traceback.
    timings, versions : dict
    ledger, provenance : str
        File names (in the run directory) of the forecasts and their provenance.
    ledger_digest : str
        Digest of the set of completed task keys the ledger holds.
    ledger_rows : int
        Rows of the ledger file (checked on read).
    pools : str
        File name of the pools' weights (origin, variable, horizon, model, weight, fallback), or ''.
    pool_warnings : tuple of dict
        The documented fallbacks the pools reported (equal weights until enough scored forecasts).
    diagnostics : dict
        Reserved (empty).
    draws_layout : str
        How the ledger stores draws: ``sorted`` (each cell ascending, delta-packed order keys),
        ``joint`` (float32 in draw order) or ``float32`` (format 2); see
        :mod:`harness.backtest.codec`.
    diagnostics_file : str
        File name of the per-task model diagnostics (model, origin, name, value, key); empty
        when no model recorded any. ``diagnostics_rows`` its rows.
    diagnostic_warnings : tuple of str
        Messages of the registered diagnostic checks (:mod:`harness.backtest.diagnostics`).
    cache : str
        The task cache the run used (joint draws, resumption; ``vintage-harness cache clean``).
    """

    name: str
    created: str
    spec: str
    spec_hash: str
    store: str
    store_checksum: str
    store_batches: int
    mode: str
    policy: str
    freq: str
    seed: int
    draws: int
    models: tuple[str, ...]
    model_specs: dict[str, dict[str, Any]]
    origins: tuple[str, ...]
    targets: tuple[str, ...]
    horizons: tuple[int, ...]
    target_periods: tuple[tuple[str, ...], ...]
    variables: dict[str, dict[str, Any]]
    scoring: ScoringSection
    backend: str
    jobs: int
    counts: dict[str, int]
    tasks: tuple[dict[str, Any], ...]
    failures: tuple[dict[str, Any], ...]
    timings: dict[str, float]
    versions: dict[str, Any]
    ledger: str
    provenance: str
    ledger_digest: str
    ledger_rows: int
    diagnostics: dict[str, Any] = field(default_factory=dict)
    pools: str = ""
    pool_warnings: tuple[dict[str, Any], ...] = ()
    draws_layout: str = "float32"
    diagnostics_file: str = ""
    diagnostics_rows: int = 0
    diagnostic_warnings: tuple[str, ...] = ()
    cache: str = ""
    format: str = FORMAT

    @property
    def benchmark(self) -> str:
        return self.scoring.benchmark or self.models[0]

    def to_dict(self) -> dict[str, Any]:
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["scoring"] = self.scoring.as_dict()
        return {"format": self.format, **{k: v for k, v in d.items() if k != "format"}}

    def to_json(self) -> bytes:
        return (json.dumps(self.to_dict(), indent=1, default=str) + "\n").encode()

    def write(self, run_dir: Path) -> Path:
        """Write ``run.json`` atomically (temporary file, fsync, rename)."""
        from vintages import atomic_write_bytes

        p = Path(run_dir) / "run.json"
        try:
            atomic_write_bytes(p, self.to_json())
        except OSError as exc:
            raise RunError(f"{p}: cannot write the run manifest: {exc.strerror or exc}") from exc
        return p

    @classmethod
    def from_dict(cls, d: dict[str, Any], source: str = "run.json") -> RunManifest:
        fmt = d.get("format") if isinstance(d, dict) else None
        if fmt not in READABLE:
            got = "no format field (written by an older version)" if fmt is None else f"format {fmt!r}"
            raise RunError(f"{source}: {got}; this version reads {', '.join(READABLE)}. Rerun the "
                           "spec with 'vintage-harness run' to rebuild the run directory (the task cache is "
                           "reused)")
        names = {f.name for f in fields(cls)}
        optional = ("diagnostics", "format") + _ADDED_IN_3
        missing = sorted(n for n in names if n not in d and n not in optional)
        if missing:
            raise RunError(f"{source}: run manifest lacks {missing}; the file is damaged or was not "
                           "written by harness")
        kw = {k: v for k, v in d.items() if k in names}
        kw["scoring"] = ScoringSection.from_dict(d["scoring"])
        if fmt != FORMAT:  # format 2 wrote none of the fields added since
            for k in _ADDED_IN_3:
                kw.pop(k, None)
        kw.setdefault("pool_warnings", ())
        for k in ("models", "origins", "targets", "tasks", "failures", "pool_warnings"):
            kw[k] = tuple(kw[k])
        kw["diagnostic_warnings"] = tuple(kw.get("diagnostic_warnings", ()))
        kw["format"] = FORMAT if fmt == FORMAT else fmt
        kw["horizons"] = tuple(int(h) for h in kw["horizons"])
        kw["target_periods"] = tuple(tuple(x) for x in kw["target_periods"])
        return cls(**kw)

    @classmethod
    def read(cls, run_dir: str | Path) -> RunManifest:
        """Read and check ``RUN/run.json``.

        Raises
        ------
        RunError
            No manifest, unreadable JSON, or an unknown format (the message names the file).
        """
        p = Path(run_dir) / "run.json"
        if not p.is_file():
            raise RunError(f"{Path(run_dir)}: not a run directory (no run.json); run 'vintage-harness run SPEC' "
                           "first")
        try:
            d = json.loads(p.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise RunError(f"{p}: unreadable run manifest ({type(exc).__name__}: "
                           f"{str(exc).splitlines()[0]})") from None
        return cls.from_dict(d, str(p))


def asdict_shallow(obj) -> dict[str, Any]:
    """A dataclass as a dict of its fields (not recursive; for messages and tables)."""
    return asdict(obj) if hasattr(obj, "__dataclass_fields__") else dict(obj)
