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

from harness.backtest.cache import TaskCache
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
    #: which cached inputs the plan came from ("plan", "cube" or "") and the entries it used
    reused: str = ""
    cache_entries: dict = field(default_factory=dict)
    #: native-frequency information sets and their (target-frequency) targets, built only when a
    #: model of the spec declares ``infoset_layout = "native"``
    native_infos: list | None = None
    native_targets: list | None = None
    #: loads the store's release index on demand (for post-run steps, e.g. pools' truths)
    cube_loader: object = field(default=None, repr=False)

    @property
    def cube(self):
        return self.cube_loader() if self.cube_loader is not None else None

    def info_for(self, task: Task):
        """The information set a task's model reads."""
        return (self.native_infos if task.layout == "native" else self.infos)[task.index]

    def targets_for(self, task: Task):
        """The targets of a task (in the target variables' frequency for a native model)."""
        return (self.native_targets if task.layout == "native" else self.targets)[task.index]

    def explain(self) -> str:
        """A human-readable description of the resolved plan (``vintage-harness run --explain``)."""
        s = self.spec
        cache = TaskCache(s.cache_dir)
        done = sum(cache.has(t.key) for t in self.tasks)
        failed = sum(cache.failure_path(t.key).is_file() and not cache.has(t.key) for t in self.tasks)
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
            f"task cache  {s.cache_dir}" + {
                "plan": " (information sets from the plan cache)",
                "cube": " (release index from the cache; information sets built)",
                "incremental": " (information sets before the first changed release reused, the rest built)",
            }.get(self.reused, ""),
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


def task_key(spec: Spec, model_spec, model_cls, info, targets, skey, *, data_hash: str | None = None,
             partial_hash: str | None = None) -> str:
    """The cache key of one task (see the runner's docstring); the two hashes may be given precomputed."""
    payload = {
        "key_version": KEY_VERSION,
        "type": model_spec.type,
        "class": f"{model_cls.__module__}:{model_cls.__qualname__}",
        "params": model_spec.params,
        "version": str(getattr(model_cls, "version", "0")),
        "code": _model_code_hash(model_cls),
        "data": data_hash if data_hash is not None else info.data_hash(),
        # how a layout reads the panel (partial quarters left out since layout 2) and which
        # cells are flagged partial: both change what a model sees
        "layout": LAYOUT_VERSION,
        "partial": partial_hash if partial_hash is not None else _partial_hash(info),
        "policy": info.policy,
        "transforms": info.transforms,
        "targets": [list(targets.variables), list(targets.horizons), str(targets.current)],
        "draws": spec.draws,
        "seed": spec.seed,
        "seed_key": list(skey),
    }
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()[:32]


def make_plan(spec: Spec) -> Plan:
    """Resolve a spec: open the store, schedule origins, build information sets, key every task.

    Origins, information sets and targets come from the plan cache when the store (its
    checksum) and every setting they depend on are unchanged (:func:`_plan_inputs`).
    """
    from harness.models.base import get_model_class
    from vintages import VintageStore

    t0 = time.perf_counter()
    store = VintageStore(spec.store)
    manifest = store.manifest()
    missing = [v for v in spec.variables if v not in manifest["variables"]]
    if missing:
        from harness.errors import SpecError

        raise SpecError(f"{spec.path}: [variables] {missing} not in the store {spec.store}; "
                        f"it holds: {', '.join(sorted(manifest['variables']))}")
    checksum = store.checksum()
    origins, infos, targets, hashes, reused, entries, t1 = _plan_inputs(spec, store, checksum)
    t2 = time.perf_counter()
    classes = {ms.name: get_model_class(ms.type) for ms in spec.models}

    loaded: list = []

    def cube_of():
        # the release index, read only when a step needs it (native sets, pools' truths), once
        if not loaded:
            loaded.append(_cube(spec.cache_dir, spec.variables, store, checksum)[0])
        return loaded[0]

    native = _native_infosets(spec, cube_of, origins, classes)
    models, tasks = {}, []
    for ms in spec.models:
        cls = classes[ms.name]
        models[ms.name] = cls(**ms.params)
        layout = _layout_of(cls)
        inf, tgs, hs = (native if layout == "native" else (infos, targets, hashes))
        for i, (o, info, tg) in enumerate(zip(origins, inf, tgs, strict=True)):
            sk = seed_key(ms.name, o)
            tasks.append(Task(ms.name, o, task_key(spec, ms, cls, info, tg, sk, data_hash=hs[i][0],
                                                   partial_hash=hs[i][1]), sk, i, layout))
    plan = Plan(spec, checksum, origins, infos, targets, models, tasks,
                {"store_and_origins": t1 - t0, "infosets": t2 - t1, "keys": time.perf_counter() - t2},
                store_batches=len(manifest["batches"]), reused=reused, cache_entries=entries)
    if native is not None:
        plan.native_infos, plan.native_targets = native[0], native[1]
    plan.cube_loader = cube_of
    return plan


def _layout_of(cls) -> str:
    return "native" if getattr(cls, "infoset_layout", "panel") == "native" else "panel"


def _native_infosets(spec: Spec, cube_of, origins, classes: dict):
    """Native-frequency information sets (monthly axis) and quarterly targets, if a model needs them.

    Each variable keeps its own frequency and transformation (a monthly indicator's ``convert``
    and ``partial`` apply to the quarterly panel only and are dropped here).
    """
    if not any(_layout_of(c) == "native" for c in classes.values()):
        return None
    from vintages import SeriesSpec, build_infosets, make_targets

    cube = cube_of()

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
    return infos, targets, [(i.data_hash(), _partial_hash(i)) for i in infos]



def _schedule(spec: Spec, cube):
    """The spec's origins on the release index."""
    from vintages import check_origins, parse_schedule

    return check_origins(cube, parse_schedule(spec.origins.as_mapping(), cube=cube))


def _build_inputs(spec: Spec, cube, origins=None):
    """Origins (scheduled unless given), information sets and targets, built from the release index."""
    from vintages import build_infosets, make_targets

    origins = _schedule(spec, cube) if origins is None else origins
    t1 = time.perf_counter()
    infos = build_infosets(cube, origins, spec.variables, freq=spec.freq, policy=spec.policy, mode=spec.mode)
    targets = [make_targets(info, spec.targets.variables, spec.targets.horizons, spec.freq) for info in infos]
    return origins, infos, targets, t1


# ---------------------------------------------------------------------------------------------
# Plan cache (origins, information sets, targets) and cube cache, keyed by the store checksum
# and every setting the information sets depend on. Kept apart from make_plan's body so that
# changes to how information sets are built (_build_inputs) need no change here: every [run]
# key except those listed in _NOT_IN_INPUTS enters the key by itself.
# ---------------------------------------------------------------------------------------------

#: version of what a plan-cache entry holds and how its key is made
PLAN_CACHE_VERSION = 1
#: [run] keys that do not change origins, information sets or targets
_NOT_IN_INPUTS = ("store", "out", "cache", "name", "seed", "draws")
_VINTAGES_CODE: list[str] = []


def _vintages_code_hash() -> str:
    """Digest of the vintages package's source (information sets are built by it)."""
    if not _VINTAGES_CODE:
        import vintages

        h = hashlib.sha256()
        for f in sorted(Path(vintages.__file__).parent.glob("*.py")):
            h.update(f.name.encode() + b"\0" + f.read_bytes())
        _VINTAGES_CODE.append(h.hexdigest()[:16])
    return _VINTAGES_CODE[0]


def _jsonable(x):
    from dataclasses import asdict, is_dataclass

    if is_dataclass(x) and not isinstance(x, type):
        return asdict(x)
    return str(x)


def inputs_digest(spec: Spec, checksum: str) -> str:
    """The plan-cache key of a spec's information sets on a store state (``checksum``)."""
    from dataclasses import fields

    run = {f.name: getattr(spec.run, f.name) for f in fields(spec.run) if f.name not in _NOT_IN_INPUTS}
    payload = {
        "version": PLAN_CACHE_VERSION,
        "store": checksum,
        "run": run,
        "variables": {k: _jsonable(v) for k, v in spec.variables.items()},
        "origins": spec.origins.as_mapping(),
        "targets": [list(spec.targets.variables), list(spec.targets.horizons)],
        "vintages": _vintages_code_hash(),
        "layout": LAYOUT_VERSION,
    }
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()[:32]


def cube_digest(checksum: str, variables) -> str:
    """The cube-cache key of a store state restricted to ``variables``."""
    payload = {"store": checksum, "variables": sorted(variables), "vintages": _vintages_code_hash()}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()[:32]


def _cube(cache_dir, variables, store, checksum: str):
    """(cube, reused): the release index of ``variables`` from the cube cache when it holds this store state, else built and kept."""
    from vintages import Cube, StoreCorruptError

    variables = list(variables)
    path = TaskCache(cache_dir).cube_path(cube_digest(checksum, variables))
    if path.is_file():
        try:
            cube = Cube.load(path)
            if cube.checksum == checksum:
                return cube, True
        except (StoreCorruptError, OSError):
            pass  # damaged: rebuilt below
    cube = store.cube(variables=variables)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        cube.save(path)
    except OSError:
        pass  # a cache that cannot be written only costs time
    return cube, False


def release_index(store_path, variables, cache_dir):
    """The release index of a store's current state for ``variables``, through the cube cache.

    For commands that need the cube of the store as it is now (scoring reads the truths from
    it): the store's checksum is read from its manifest (cheap); the cube comes from
    ``cache_dir`` when it holds that state, else it is built and kept there.

    Example: ``evaluate(run_dir, truth, cube=release_index(m.store, list(m.variables), m.cache))``
    for a run manifest ``m``.
    """
    from vintages import VintageStore

    store = VintageStore(store_path)
    return _cube(cache_dir, variables, store, store.checksum())[0]


def _plan_inputs(spec: Spec, store, checksum: str):
    """(origins, infos, targets, hashes, reused, entries, t1): from the plan cache or built and kept.

    ``hashes[i]`` are the data and partial-mask digests of information set ``i`` (task keys);
    ``reused`` names the cache that answered ("plan", "cube" or ""); ``entries`` the cache
    entries used (the run registers them).
    """
    import pickle

    from harness.backtest.cache import private_dir, trusted_file

    cache = TaskCache(spec.cache_dir)
    digest = inputs_digest(spec, checksum)
    path = cache.plan_path(digest)
    entries = {"plans": [digest], "cubes": [cube_digest(checksum, spec.variables)]}
    if trusted_file(path):
        try:
            with open(path, "rb") as fh:
                b = pickle.load(fh)
            if b.get("version") == PLAN_CACHE_VERSION and b.get("digest") == digest:
                return (b["origins"], b["infos"], b["targets"], b["hashes"], "plan", entries,
                        time.perf_counter())
        except Exception:  # noqa: BLE001 - any damaged entry is rebuilt
            pass
    cube, cube_reused = _cube(spec.cache_dir, spec.variables, store, checksum)
    reused = "cube" if cube_reused else ""
    latest = cache.plan_dir() / f"latest-{inputs_digest(spec, '')}.json"
    update = _update_inputs(spec, cube, latest, cache) if spec.mode == "real-time" else None
    if update is not None:
        origins, infos, targets, hashes, t1 = update
        reused = "incremental"
    else:
        origins, infos, targets, t1 = _build_inputs(spec, cube)
        hashes = [(info.data_hash(), _partial_hash(info)) for info in infos]
    try:
        from vintages import atomic_write_bytes

        private_dir(cache.plan_dir())
        data = pickle.dumps({"version": PLAN_CACHE_VERSION, "digest": digest, "origins": origins,
                             "infos": infos, "targets": targets, "hashes": hashes},
                            protocol=pickle.HIGHEST_PROTOCOL)
        atomic_write_bytes(path, data)
        atomic_write_bytes(latest, json.dumps({"digest": digest, "cube": entries["cubes"][0]}).encode())
    except (OSError, pickle.PicklingError, TypeError, AttributeError):
        pass  # an information set that does not pickle, or a read-only cache: only costs time
    return origins, infos, targets, hashes, reused, entries, t1


def _update_inputs(spec: Spec, cube, latest: Path, cache: TaskCache):
    """The previous plan of these settings brought up to date, or None (then everything is rebuilt).

    In real time the information set of an origin holds only values released on or before it,
    so when the store changed only in values released from day ``d`` on (an append, a
    correction: :func:`first_change` compares the old and new release index value by value),
    the information sets of the origins before ``d`` are the previous ones and only the later
    origins are built. Pseudo-real-time sets read the latest vintage and are always rebuilt.
    """
    import pickle

    from harness.backtest.cache import trusted_file
    from vintages import Cube, StoreCorruptError

    try:
        ptr = json.loads(latest.read_text()) if trusted_file(latest) else None
        old_plan = cache.plan_path(ptr["digest"]) if ptr else None
        if old_plan is None or not trusted_file(old_plan) or not cache.cube_path(ptr["cube"]).is_file():
            return None
        old_cube = Cube.load(cache.cube_path(ptr["cube"]))
        with open(old_plan, "rb") as fh:
            old = pickle.load(fh)
        if old.get("version") != PLAN_CACHE_VERSION:
            return None
    except (OSError, ValueError, KeyError, StoreCorruptError, pickle.UnpicklingError, EOFError, AttributeError):
        return None
    day = first_change(old_cube, cube, list(spec.variables))
    if day is False:
        return None
    origins = _schedule(spec, cube)
    old_origins = np.asarray(old["origins"], dtype="datetime64[D]")
    n = 0
    while (n < min(len(origins), len(old_origins)) and origins[n] == old_origins[n]
           and (day is None or np.datetime64(origins[n], "D") < day)):
        n += 1
    if n == 0:
        return None
    t1 = time.perf_counter()
    infos, targets, hashes = list(old["infos"][:n]), list(old["targets"][:n]), list(old["hashes"][:n])
    if n < len(origins):
        _, new_infos, new_targets, _ = _build_inputs(spec, cube, origins[n:])
        infos += new_infos
        targets += new_targets
        hashes += [(info.data_hash(), _partial_hash(info)) for info in new_infos]
    return origins, infos, targets, hashes, t1


def first_change(old, new, variables) -> np.datetime64 | None | bool:
    """The first release day at which two release indexes differ for ``variables``.

    None when they hold the same values; False when they cannot be compared value by value
    (another frequency or metadata of a variable): then nothing may be reused. Exact: every
    value is compared as (variable, period, release day, the float's bits), no hashing.
    """
    if any(old.meta.get(v) != new.meta.get(v) for v in variables):
        return False
    names = {v: i for i, v in enumerate(sorted(variables))}

    def rows(cube) -> np.ndarray:
        parts = []
        for fi in cube.indexes.values():
            n = fi.n_period
            var = np.array([names.get(str(v), -1) for v in fi.variables], dtype=np.int64)[fi.cell // n]
            sel = var >= 0
            parts.append(np.column_stack([var[sel], fi.periods[fi.cell[sel] % n], fi.day[sel].astype(np.int64),
                                          fi.value[sel].view(np.int64)]))
        return np.concatenate(parts) if parts else np.empty((0, 4), dtype=np.int64)

    both = np.concatenate([rows(old), rows(new)])
    if not len(both):
        return None
    both = both[np.lexsort(both.T[::-1])]
    # a (variable, period, day) appears once per index, so a value both hold is a pair of equal
    # neighbours after sorting; whatever stays unpaired is new, changed or gone
    same = np.all(both[1:] == both[:-1], axis=1)
    paired = np.zeros(len(both), dtype=bool)
    paired[1:] |= same
    paired[:-1] |= same
    if paired.all():
        return None
    return np.datetime64(int(both[~paired, 2].min()), "D")
