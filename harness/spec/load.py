"""The backtest spec (TOML): parse, validate once, explain errors.

A spec names the store, the variables and how each is transformed, the targets and horizons,
the origins schedule, the models, the number of draws and the seed, the truths and
sub-periods to score, and the run directory. Unknown keys are errors: a typo must not pass.

Example::

    [run]
    store = "store"            # relative paths are relative to the spec file
    out = "runs/demo"
    seed = 20261201
    draws = 2000
    freq = "Q"
    policy = "keep"            # keep | balance | realign

    [origins]
    rule = "quarterly"
    day = 15
    month_of_quarter = 2
    start = "2006-01-01"
    end = "2026-11-30"

    [variables.gdp]
    transform = "dlog_ann"
    [variables.cpi]
    transform = "dlog_ann"
    convert = "mean"

    [targets]
    variables = ["gdp", "cpi"]
    horizons = { min = -1, max = 8 }

    [models.rw]
    type = "nochange"
    [models.bvar]
    type = "bvar"
    lags = 4
    tightness = 0.2

    [scoring]
    benchmark = "rw"
    truths = ["first", "latest"]
    chronology = "chronology.csv"
    [scoring.subperiods]
    crisis = ["2009Q1", "2010Q2"]
"""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from harness.errors import SpecError
from vintages import CONVERSIONS, FREQS, MODES, PARTIAL_POLICIES, POLICIES, TRANSFORMS

RUN_KEYS = {"store", "out", "seed", "draws", "freq", "policy", "mode", "cache", "name"}
SECTION_KEYS = {"run", "origins", "variables", "targets", "models", "scoring"}
VARIABLE_KEYS = {"transform", "convert", "partial"}  # partial: keep | drop (default: drop for targets)
TARGET_KEYS = {"variables", "horizons"}
SCORING_KEYS = {"benchmark", "truths", "truth", "chronology", "cycle_variable", "subperiods",
                "quantile_levels", "coverage_levels", "min_phase", "min_cycle"}
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_\-]{0,63}$")


@dataclass(frozen=True)
class ModelSpec:
    """One model of the spec: its label, type (registered name or ``package.module:Class``), parameters."""

    name: str
    type: str
    params: dict[str, Any]


@dataclass(frozen=True)
class Spec:
    """A validated spec. Paths are absolute. ``raw`` is the parsed TOML as written."""

    path: Path
    store: Path
    out: Path
    seed: int
    draws: int
    freq: str
    policy: str
    mode: str
    origins: dict[str, Any]
    variables: dict[str, dict[str, Any]]
    targets: tuple[str, ...]
    horizons: tuple[int, ...]
    models: tuple[ModelSpec, ...]
    scoring: dict[str, Any]
    raw: dict[str, Any] = field(repr=False)
    cache: Path | None = None
    name: str = "run"

    def hash(self) -> str:
        """Digest of the spec's content (not of its file name or location)."""
        return hashlib.sha256(json.dumps(self.raw, sort_keys=True, default=str).encode()).hexdigest()

    def model(self, name: str) -> ModelSpec:
        for m in self.models:
            if m.name == name:
                return m
        raise SpecError(f"{self.path}: no model named {name!r}; models: {sorted(m.name for m in self.models)}")

    @property
    def cache_dir(self) -> Path:
        return self.cache or (self.out / "tasks")

    def with_overrides(self, **kw) -> Spec:
        """A copy with some fields replaced (e.g. ``out``, ``mode``), validated values only."""
        from dataclasses import replace

        return replace(self, **kw)


def _err(path, where: str, msg: str) -> SpecError:
    return SpecError(f"{path}: {where}: {msg}")


def _check_keys(path, where: str, table: dict, allowed: set[str], required: tuple[str, ...] = ()) -> None:
    if not isinstance(table, dict):
        raise _err(path, where, f"expected a table, got {type(table).__name__}")
    for k in table:
        if k not in allowed:
            raise _err(path, where, f"unknown key {k!r}; allowed keys: {', '.join(sorted(allowed))}")
    for k in required:
        if k not in table:
            raise _err(path, where, f"missing required key {k!r}")


def _choice(path, where, value, allowed) -> str:
    if value not in allowed:
        raise _err(path, where, f"{value!r} is not allowed; expected one of {', '.join(sorted(allowed))}")
    return value


def _int(path, where, value, *, minimum=None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise _err(path, where, f"expected an integer, got {value!r}")
    if minimum is not None and value < minimum:
        raise _err(path, where, f"must be ≥ {minimum}, got {value}")
    return value


def _date(path, where, value) -> str:
    import datetime as dt

    if isinstance(value, dt.date):
        return value.isoformat()
    if not isinstance(value, str) or not re.match(r"^\d{4}-\d{2}-\d{2}$", value):
        raise _err(path, where, f"expected a date YYYY-MM-DD, got {value!r}")
    try:
        dt.date.fromisoformat(value)
    except ValueError:
        raise _err(path, where, f"{value!r} is not a valid calendar date") from None
    return value


def _period(path, where, value, freq) -> str:
    from vintages import parse_periods

    o, f = parse_periods([str(value)])
    if f[0] != freq:
        raise _err(path, where, f"expected a period of frequency {freq} such as "
                   f"{'2009Q1' if freq == 'Q' else '2009-01'}, got {value!r}")
    return str(value)


def load_spec(path: str | Path, *, out: str | Path | None = None, check_store: bool = True) -> Spec:
    """Parse and validate a spec file.

    Parameters
    ----------
    path : path-like
        The TOML file.
    out : path-like, optional
        Override the run directory (``[run] out``).
    check_store : bool
        Require the store directory to exist.

    Raises
    ------
    SpecError
        Naming the file, the key and what was expected.
    """
    path = Path(path).resolve()
    try:
        raw = tomllib.loads(path.read_text())
    except FileNotFoundError:
        raise SpecError(f"{path}: spec file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{path}: not valid TOML: {exc}") from None
    try:
        return parse_spec(raw, path, out=out, check_store=check_store)
    except SpecError as exc:
        line = _locate(path.read_text(), str(exc)[len(str(path)) + 2:])
        if line is None:
            raise
        raise SpecError(f"{path}, line {line}: {str(exc)[len(str(path)) + 2:]}") from None


def _locate(text: str, message: str) -> int | None:
    """Best-effort line number of the key an error message names (``[table] key`` or ``unknown key 'k'``)."""
    m = re.match(r"\[([A-Za-z0-9_.\-]+)\]\s*([A-Za-z0-9_]+)?", message)
    if not m:
        return None
    table, key = m.group(1), m.group(2)
    k = re.search(r"unknown key '([^']+)'", message)
    if k:
        key = k.group(1)
    lines = text.splitlines()
    start = None
    for i, ln in enumerate(lines):
        if re.match(rf"^\s*\[{re.escape(table)}\]\s*(#.*)?$", ln):
            start = i
            break
    if start is None:
        return None
    if not key:
        return start + 1
    for j in range(start + 1, len(lines)):
        if re.match(r"^\s*\[", lines[j]):
            break
        if re.match(rf"^\s*{re.escape(key)}\s*=", lines[j]):
            return j + 1
    return start + 1


def parse_spec(raw: dict, path: str | Path = "<spec>", *, out=None, check_store: bool = True) -> Spec:
    """Validate an already-parsed spec dictionary (see :func:`load_spec`)."""
    path = Path(path)
    base = path.parent if path.name != "<spec>" else Path.cwd()
    _check_keys(path, "top level", raw, SECTION_KEYS, required=("run", "origins", "variables", "targets", "models"))
    run = raw["run"]
    _check_keys(path, "[run]", run, RUN_KEYS, required=("store",))
    store = (base / str(run["store"])).resolve()
    if check_store and not (store / "manifest.json").is_file():
        raise _err(path, "[run] store", f"no vintage store at {store} (create one with 'harness vintages init')")
    out_dir = Path(out).resolve() if out is not None else (base / str(run.get("out", "runs/" + path.stem))).resolve()
    seed = _int(path, "[run] seed", run.get("seed", 0), minimum=0)
    draws = _int(path, "[run] draws", run.get("draws", 1000), minimum=10)
    freq = _choice(path, "[run] freq", run.get("freq", "Q"), FREQS)
    policy = _choice(path, "[run] policy", run.get("policy", "keep"), POLICIES)
    mode = _choice(path, "[run] mode", run.get("mode", "real-time"), MODES)
    cache = (base / str(run["cache"])).resolve() if "cache" in run else None
    name = str(run.get("name", path.stem))

    origins = dict(raw["origins"])
    if not isinstance(origins, dict) or "rule" not in origins:
        raise _err(path, "[origins]", "missing required key 'rule' (explicit, quarterly, monthly, after_release)")
    for k in ("start", "end"):
        if k in origins:
            origins[k] = _date(path, f"[origins] {k}", origins[k])
    if "dates" in origins:
        if not isinstance(origins["dates"], list) or not origins["dates"]:
            raise _err(path, "[origins] dates", "expected a non-empty list of dates")
        origins["dates"] = [_date(path, f"[origins] dates[{i}]", d) for i, d in enumerate(origins["dates"])]
    try:
        from vintages import parse_schedule

        parse_schedule(origins, validate_only=True)
    except (ValueError, TypeError) as exc:
        raise _err(path, "[origins]", str(exc)) from None

    variables = raw["variables"]
    if not isinstance(variables, dict) or not variables:
        raise _err(path, "[variables]", "expected at least one [variables.NAME] table")
    vspec = {}
    for vname, v in variables.items():
        where = f"[variables.{vname}]"
        if not _NAME.match(vname):
            raise _err(path, where, "variable names are letters, digits and '_'")
        _check_keys(path, where, v, VARIABLE_KEYS)
        t = v.get("transform", "level")
        if t not in TRANSFORMS:  # built-in and registered transformations
            raise _err(path, f"{where} transform", f"{t!r} is not allowed; expected one of "
                       f"{', '.join(sorted(TRANSFORMS))}")
        d = {"transform": t}
        if "convert" in v:
            d["convert"] = _choice(path, f"{where} convert", v["convert"], CONVERSIONS)
        if "partial" in v:
            d["partial"] = _choice(path, f"{where} partial", v["partial"], PARTIAL_POLICIES)
        vspec[vname] = d

    tg = raw["targets"]
    targets_listed = tg.get("variables", []) if isinstance(tg, dict) else []
    for vname, d in vspec.items():
        # a partially observed quarter of a *target* would count as already observed and make
        # its nowcast degenerate: by default targets drop partial quarters, indicators keep them
        if "convert" in d and "partial" not in d:
            d["partial"] = "drop" if vname in targets_listed else "keep"
    _check_keys(path, "[targets]", tg, TARGET_KEYS, required=("variables", "horizons"))
    tv = tg["variables"]
    if not isinstance(tv, list) or not tv:
        raise _err(path, "[targets] variables", "expected a non-empty list of variable names")
    for t in tv:
        if t not in vspec:
            raise _err(path, "[targets] variables", f"{t!r} is not among [variables]: {', '.join(sorted(vspec))}")
    h = tg["horizons"]
    if isinstance(h, dict):
        _check_keys(path, "[targets] horizons", h, {"min", "max"}, required=("min", "max"))
        lo = _int(path, "[targets] horizons.min", h["min"])
        hi = _int(path, "[targets] horizons.max", h["max"])
        if hi < lo:
            raise _err(path, "[targets] horizons", f"empty range: max {hi} < min {lo}")
        horizons = tuple(range(lo, hi + 1))
    elif isinstance(h, list) and h:
        horizons = tuple(sorted({_int(path, "[targets] horizons", x) for x in h}))
    else:
        raise _err(path, "[targets] horizons", "expected a list of integers or {min = -1, max = 8}")
    if min(horizons) < -12 or max(horizons) > 40:
        raise _err(path, "[targets] horizons", f"horizons must lie in -12…40, got {min(horizons)}…{max(horizons)}")

    models_raw = raw["models"]
    if not isinstance(models_raw, dict) or not models_raw:
        raise _err(path, "[models]", "expected at least one [models.NAME] table")
    from harness.models.base import available_models, get_model_class

    models = []
    for mname, m in models_raw.items():
        where = f"[models.{mname}]"
        if not _NAME.match(mname):
            raise _err(path, where, "model names are letters, digits, '_' and '-'")
        if not isinstance(m, dict) or "type" not in m:
            raise _err(path, where, f"missing required key 'type' (one of {', '.join(available_models())} "
                       "or package.module:Class)")
        params = {k: v for k, v in m.items() if k != "type"}
        try:
            cls = get_model_class(m["type"])
        except (ValueError, ImportError, AttributeError) as exc:
            raise _err(path, f"{where} type", str(exc)) from None
        allowed = _init_params(cls)
        if allowed is not None:
            for k in params:
                if k not in allowed:
                    raise _err(path, where, f"unknown key {k!r}; parameters of {m['type']}: "
                               f"{', '.join(sorted(allowed)) or '(none)'}")
        try:
            from harness.models.params import coerce_toml, validate_params

            params = {k: coerce_toml(cls, k, v) for k, v in params.items()}
            model = cls(**params)
            full = model.params() if callable(getattr(model, "params", None)) else params
            validate_params(cls, {**full, **params}, model=mname)
        except TypeError as exc:
            raise _err(path, where, f"bad parameters for {m['type']}: {exc}") from None
        except ValueError as exc:
            bad = re.search(r"parameter '([^']+)'", str(exc))
            raise _err(path, f"{where} {bad.group(1)}" if bad else where, str(exc)) from None
        models.append(ModelSpec(mname, m["type"], params))

    scoring = dict(raw.get("scoring", {}))
    _check_keys(path, "[scoring]", scoring, SCORING_KEYS)
    if "benchmark" in scoring and scoring["benchmark"] not in models_raw:
        raise _err(path, "[scoring] benchmark", f"{scoring['benchmark']!r} is not a model of this spec; "
                   f"models: {', '.join(sorted(models_raw))}")
    scoring.setdefault("benchmark", models[0].name)
    truths = scoring.get("truths", ["first", "latest"])
    if isinstance(truths, str):
        truths = [truths]
    from vintages import parse_truth

    for t in truths:
        try:
            parse_truth(t)
        except ValueError as exc:
            raise _err(path, "[scoring] truths", str(exc)) from None
    scoring["truths"] = list(truths)
    scoring.setdefault("truth", truths[0])
    if scoring["truth"] not in truths:
        scoring["truths"] = [scoring["truth"]] + scoring["truths"]
    if "chronology" in scoring:
        chron = (base / str(scoring["chronology"])).resolve()
        if check_store and not chron.is_file():
            raise _err(path, "[scoring] chronology", f"file not found: {chron}")
        scoring["chronology"] = str(chron)
    if "cycle_variable" in scoring and scoring["cycle_variable"] not in vspec:
        raise _err(path, "[scoring] cycle_variable", f"{scoring['cycle_variable']!r} is not among [variables]")
    sub = scoring.get("subperiods", {})
    if not isinstance(sub, dict):
        raise _err(path, "[scoring] subperiods", "expected a table NAME = [START, END]")
    clean = {}
    for sname, rng in sub.items():
        where = f"[scoring.subperiods] {sname}"
        if sname in ("full", "recession", "expansion"):
            raise _err(path, where, "'full', 'recession' and 'expansion' are reserved names")
        if not isinstance(rng, list) or len(rng) != 2:
            raise _err(path, where, "expected [START, END] periods, e.g. [\"2009Q1\", \"2010Q2\"]")
        a, b = (_period(path, where, x, freq) for x in rng)
        clean[sname] = (a, b)
    scoring["subperiods"] = clean
    for k in ("quantile_levels", "coverage_levels"):
        if k in scoring:
            lv = scoring[k]
            if not isinstance(lv, list) or not all(isinstance(x, float | int) and 0 < x < 1 for x in lv):
                raise _err(path, f"[scoring] {k}", "expected a list of numbers strictly between 0 and 1")

    return Spec(path=path, store=store, out=out_dir, seed=seed, draws=draws, freq=freq, policy=policy, mode=mode,
                origins=origins, variables=vspec, targets=tuple(tv), horizons=horizons, models=tuple(models),
                scoring=scoring, raw=raw, cache=cache, name=name)


def _init_params(cls) -> set[str] | None:
    """Keyword parameters a model class accepts (None when it takes ``**kwargs``)."""
    import inspect

    try:
        sig = inspect.signature(cls.__init__)
    except (TypeError, ValueError):
        return None
    if any(p.kind is p.VAR_KEYWORD for p in sig.parameters.values()):
        return None
    return {n for n, p in sig.parameters.items() if n != "self" and p.kind is not p.VAR_POSITIONAL}
