"""The plan of a run: origins, information sets, targets, models and the task keys (no computing yet).

The driver builds the cube once and the information set of every origin in one vectorised pass
(:func:`vintages.build_infosets`); each task (one model at one origin) gets a deterministic seed
key and a cache key, so that a rerun computes only what is missing.
"""

from __future__ import annotations

import hashlib
import inspect
import json
import sys
import time
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from harness.backtest.ledger import failure_path, task_path
from harness.models.base import LAYOUT_VERSION
from harness.spec import Spec


@dataclass
class Task:
    """One model refit at one origin."""

    model: str
    origin: np.datetime64
    key: str
    seed_key: tuple[int, int]
    index: int  # position of the origin in the plan


@dataclass
class Plan:
    """Everything a run needs, resolved: origins, information sets, targets, model objects, tasks."""

    spec: Spec
    store_checksum: str
    origins: np.ndarray
    infos: list
    targets: list
    models: dict
    tasks: list[Task]
    timings: dict = field(default_factory=dict)
    store_batches: int = 0

    def explain(self) -> str:
        """A human-readable description of the resolved plan (``harness run --explain``)."""
        s = self.spec
        cache = s.cache_dir
        done = sum(task_path(cache, t.key).is_file() for t in self.tasks)
        failed = sum(failure_path(cache, t.key).is_file() and not task_path(cache, t.key).is_file()
                     for t in self.tasks)
        lines = [
            f"spec        {s.path} (hash {s.hash()[:12]})",
            f"store       {s.store} (checksum {self.store_checksum[:12]})",
            f"mode        {s.mode}; ragged edge policy {s.policy}; panel frequency {s.freq}",
            f"origins     {len(self.origins)}: {self.origins[0]} … {self.origins[-1]}" if len(self.origins) else
            "origins     none",
            "variables   " + ", ".join(f"{k} ({v.transform}{', ' + v.convert if v.convert else ''})"
                                        for k, v in s.variables.items()),
            f"targets     {', '.join(s.targets.variables)} at horizons {s.targets.horizons[0]}…"
            f"{s.targets.horizons[-1]}"
            f" (h<0 backcast, 0 nowcast, >0 forecast)",
            "models      " + "; ".join(f"{m.name} = {m.type} {json.dumps(m.params) if m.params else ''}".strip()
                                        for m in s.models),
            f"draws       {s.draws} per forecast; seed {s.seed}",
            f"tasks       {len(self.tasks)} ({len(s.models)} models × {len(self.origins)} origins): "
            f"{done} cached, {failed} failed before, {len(self.tasks) - done - failed} to compute",
            f"run dir     {s.out}",
        ]
        if len(self.infos):
            first = self.infos[-1]
            edge = ", ".join(f"{v} {first.last_observed[v]}" for v in first.variables)
            lines.append(f"ragged edge at {self.origins[-1]}: {edge}")
        return "\n".join(lines)


_CODE_HASHES: dict[str, str] = {}


def _model_code_hash(cls) -> str:
    """Digest of the code a model's results depend on.

    For a built-in model, every module of :mod:`harness.models` (a model reaches its samplers,
    kernels and helpers there); for a user's model, its own module.
    """
    name = cls.__module__
    if name in _CODE_HASHES:
        return _CODE_HASHES[name]
    h = hashlib.sha256()
    mod = sys.modules.get(name)
    files = []
    if name.startswith("harness.models"):
        files = sorted(Path(sys.modules["harness.models"].__file__).parent.glob("*.py"))
    elif mod is not None and getattr(mod, "__file__", None):
        # a user's model may name the other modules its results depend on
        extra = [sys.modules[m] for m in getattr(cls, "source_modules", ()) if m in sys.modules]
        files = [Path(mod.__file__)] + [Path(m.__file__) for m in extra if getattr(m, "__file__", None)]
    for f in files:
        try:
            h.update(f.name.encode() + b"\0" + f.read_bytes())
        except OSError:
            h.update(f.name.encode())
    if not files:
        try:
            h.update(inspect.getsource(mod).encode())
        except (OSError, TypeError):
            h.update(cls.__qualname__.encode())
    _CODE_HASHES[name] = h.hexdigest()[:16]
    return _CODE_HASHES[name]


def _partial_hash(info) -> str:
    part = getattr(info, "partial", None)
    if part is None:
        return ""
    return hashlib.sha256(np.ascontiguousarray(np.asarray(part.values, dtype=bool)).tobytes()).hexdigest()[:16]


#: version of the task key's recipe; bumped whenever what a key hashes (or the seed mapping) changes
KEY_VERSION = 2
#: origins are counted in days from here in the seed key (a spawn key must be non-negative;
#: real-time data sets commonly start in the 1960s, so days since 1970 would not do)
_SEED_EPOCH = np.datetime64("1800-01-01", "D")


def seed_key(model: str, origin: np.datetime64) -> tuple[int, int]:
    """The stable spawn key of a (model label, origin) pair: (crc32 of the label, days since 1800-01-01).

    Raises
    ------
    ValueError
        For an origin before 1800-01-01 (no store holds such data; periods start in 1800).
    """
    days = int((np.datetime64(origin, "D") - _SEED_EPOCH).astype(np.int64))
    if days < 0:
        raise ValueError(f"origin {origin} lies before {_SEED_EPOCH}; origins start in 1800")
    return (zlib.crc32(model.encode()), days)


def task_key(spec: Spec, model_spec, model_cls, info, targets, skey) -> str:
    payload = {
        "key_version": KEY_VERSION,
        "type": model_spec.type,
        "class": f"{model_cls.__module__}:{model_cls.__qualname__}",
        "params": model_spec.params,
        "version": str(getattr(model_cls, "version", "0")),
        "code": _model_code_hash(model_cls),
        "data": info.data_hash(),
        # how a layout reads the panel (partial quarters left out since layout 2) and which
        # cells are flagged partial: both change what a model sees
        "layout": LAYOUT_VERSION,
        "partial": _partial_hash(info),
        "policy": info.policy,
        "transforms": info.transforms,
        "targets": [list(targets.variables), list(targets.horizons), str(targets.current)],
        "draws": spec.draws,
        "seed": spec.seed,
        "seed_key": list(skey),
    }
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()[:32]


def make_plan(spec: Spec) -> Plan:
    """Resolve a spec: open the store, schedule origins, build information sets, key every task."""
    from harness.models.base import get_model_class
    from vintages import VintageStore, build_infosets, check_origins, make_targets, parse_schedule

    t0 = time.perf_counter()
    store = VintageStore(spec.store)
    missing = [v for v in spec.variables if v not in store.variables]
    if missing:
        from harness.errors import SpecError

        raise SpecError(f"{spec.path}: [variables] {missing} not in the store {spec.store}; "
                        f"it holds: {', '.join(sorted(store.variables))}")
    cube = store.cube(variables=list(spec.variables))
    origins = check_origins(cube, parse_schedule(spec.origins.as_mapping(), cube=cube))
    t1 = time.perf_counter()
    infos = build_infosets(cube, origins, spec.variables, freq=spec.freq, policy=spec.policy, mode=spec.mode)
    targets = [make_targets(info, spec.targets.variables, spec.targets.horizons, spec.freq) for info in infos]
    t2 = time.perf_counter()
    models, tasks = {}, []
    for ms in spec.models:
        cls = get_model_class(ms.type)
        models[ms.name] = cls(**ms.params)
        for i, (o, info, tg) in enumerate(zip(origins, infos, targets, strict=True)):
            sk = seed_key(ms.name, o)
            tasks.append(Task(ms.name, o, task_key(spec, ms, cls, info, tg, sk), sk, i))
    return Plan(spec, store.checksum(), origins, infos, targets, models, tasks,
                {"store_and_origins": t1 - t0, "infosets": t2 - t1, "keys": time.perf_counter() - t2},
                store_batches=len(store.manifest()["batches"]))
