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
    layout: str = "panel"  # which information sets the model reads: "panel" or "native"


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
    #: native-frequency information sets and their (target-frequency) targets, built only when a
    #: model of the spec declares ``infoset_layout = "native"``
    native_infos: list | None = None
    native_targets: list | None = None
    #: the store's release index (for truths the post-run steps need, e.g. pools' weights)
    cube: object = field(default=None, repr=False)

    def info_for(self, task: Task):
        """The information set a task's model reads."""
        return (self.native_infos if task.layout == "native" else self.infos)[task.index]

    def targets_for(self, task: Task):
        """The targets of a task (in the target variables' frequency for a native model)."""
        return (self.native_targets if task.layout == "native" else self.targets)[task.index]

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
    classes = {ms.name: get_model_class(ms.type) for ms in spec.models}
    native = _native_infosets(spec, cube, origins, classes)
    t3 = time.perf_counter()
    models, tasks = {}, []
    for ms in spec.models:
        cls = classes[ms.name]
        models[ms.name] = cls(**ms.params)
        layout = _layout_of(cls)
        inf, tgs = (native if layout == "native" else (infos, targets))
        for i, (o, info, tg) in enumerate(zip(origins, inf, tgs, strict=True)):
            sk = seed_key(ms.name, o)
            tasks.append(Task(ms.name, o, task_key(spec, ms, cls, info, tg, sk), sk, i, layout))
    plan = Plan(spec, store.checksum(), origins, infos, targets, models, tasks,
                {"store_and_origins": t1 - t0, "infosets": t2 - t1 + (t3 - t2),
                 "keys": time.perf_counter() - t3},
                store_batches=len(store.manifest()["batches"]))
    if native is not None:
        plan.native_infos, plan.native_targets = native
    plan.cube = cube
    return plan


def _layout_of(cls) -> str:
    return "native" if getattr(cls, "infoset_layout", "panel") == "native" else "panel"


def _native_infosets(spec: Spec, cube, origins, classes: dict):
    """Native-frequency information sets (monthly axis) and quarterly targets, if a model needs them.

    Each variable keeps its own frequency and transformation (a monthly indicator's ``convert``
    and ``partial`` apply to the quarterly panel only and are dropped here).
    """
    if not any(_layout_of(c) == "native" for c in classes.values()):
        return None
    from vintages import SeriesSpec, build_infosets, make_targets

    series = {n: SeriesSpec(transform=s.transform) for n, s in spec.variables.items()}
    infos = build_infosets(cube, origins, series, freq="M", layout="native", policy="keep",
                           mode=spec.mode)
    tfreq = spec.freq
    odd = [v for v in spec.targets.variables if cube.freq_of(v) != tfreq]
    if odd:
        from harness.errors import SpecError

        names = sorted(n for n, c in classes.items() if _layout_of(c) == "native")
        raise SpecError(f"{spec.path}: [targets] {odd} are not of the panel frequency {tfreq!r} in the "
                        f"store (they are converted there); native-frequency model(s) {names} forecast "
                        "targets in their own frequency: target only variables of that frequency")
    targets = [make_targets(info, spec.targets.variables, spec.targets.horizons, tfreq) for info in infos]
    return infos, targets
