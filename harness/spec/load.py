"""The backtest spec (TOML): parse into frozen, typed sections, validate once, explain errors.

A spec names the store, the variables and how each is transformed, the targets and horizons,
the origins schedule, the models, the number of draws and the seed, the truths and
sub-periods to score, and the run directory. Unknown keys are errors: a typo must not pass.
Everything a run would refuse later is refused here, so ``vintage-harness run --explain`` catches it
(exit code 2, naming the file, line and key).

**A spec is code.** A model type ``path/to/file.py:Class`` or ``package.module:Class`` imports
and runs that code when the spec is read (to check the model's parameters). Run only specs you
trust. Modules are imported only from the paths the spec names (a file path, relative to the
spec) or from installed packages, never implicitly from the current directory.

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

import datetime as dt
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from harness.constraints import Options, check_value, describe_alternatives
from harness.errors import SpecError
from harness.spec.sections import (
    NAME,
    ModelSpec,
    PoolSpec,
    RunSection,
    ScoringSection,
    SubPeriod,
    TargetsSection,
    cache_location,
)

SECTION_KEYS = ("models", "origins", "pools", "run", "scoring", "targets", "variables")
REQUIRED_SECTIONS = ("run", "origins", "variables", "targets", "models")
VARIABLE_KEYS = ("convert", "partial", "transform")
_NAME = re.compile(f"^{NAME}$")


@dataclass(frozen=True)
class OriginsSection:
    """``[origins]``: the schedule rule and its options (checked by :func:`vintages.parse_schedule`)."""

    rule: str
    options: dict[str, Any] = field(default_factory=dict)

    def as_mapping(self) -> dict[str, Any]:
        """The mapping :func:`vintages.parse_schedule` reads."""
        return {"rule": self.rule, **self.options}


@dataclass(frozen=True)
class Spec:
    """A validated spec: frozen sections; paths are absolute; ``raw`` is the TOML as written."""

    path: Path
    raw: dict[str, Any] = field(repr=False)
    run: RunSection
    origins: OriginsSection
    variables: dict[str, Any]  # name -> vintages.SeriesSpec, in the spec's order
    targets: TargetsSection
    models: tuple[ModelSpec, ...]
    scoring: ScoringSection
    pools: tuple[PoolSpec, ...] = ()

    # the run section's values, read often
    @property
    def store(self) -> Path:
        return self.run.store

    @property
    def out(self) -> Path:
        return self.run.out

    @property
    def seed(self) -> int:
        return self.run.seed

    @property
    def draws(self) -> int:
        return self.run.draws

    @property
    def freq(self) -> str:
        return self.run.freq

    @property
    def policy(self) -> str:
        return self.run.policy

    @property
    def mode(self) -> str:
        return self.run.mode

    @property
    def name(self) -> str:
        return self.run.name

    @property
    def cache_dir(self) -> Path:
        return cache_location(self.run)

    @property
    def benchmark(self) -> str:
        return self.scoring.benchmark

    def hash(self) -> str:
        """Digest of the spec's content (not of its file name or location)."""
        return hashlib.sha256(json.dumps(self.raw, sort_keys=True, default=str).encode()).hexdigest()

    @property
    def labels(self) -> tuple[str, ...]:
        """Every forecaster of the run: the models, then the pools."""
        return tuple(m.name for m in self.models) + tuple(p.name for p in self.pools)

    def model(self, name: str) -> ModelSpec:
        for m in self.models:
            if m.name == name:
                return m
        raise SpecError(f"{self.path}: no model named {name!r}; models: {sorted(m.name for m in self.models)}")

    def series(self) -> dict[str, dict[str, Any]]:
        """Variables as plain mappings (JSON-able; what the run manifest stores)."""
        return {n: {k: v for k, v in (("transform", s.transform), ("convert", s.convert),
                                       ("partial", s.partial)) if v is not None}
                for n, s in self.variables.items()}

    def with_run(self, **changes) -> Spec:
        """A copy with some ``[run]`` values replaced (e.g. ``out``, ``mode``, ``cache``)."""
        return replace(self, run=replace(self.run, **changes))


def _err(path, where: str, msg: str) -> SpecError:
    return SpecError(f"{path}: {where}: {msg}")


def _short(value: Any, limit: int = 80) -> str:
    """``repr`` of a value, cut with an ellipsis (a huge cell must not flood the error line)."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _check(path, where: str, accepts, value: Any, *, toml: bool = True) -> Any:
    ok, coerced = check_value(accepts, value, toml=toml)
    if ok:
        return coerced
    if len(accepts) == 1 and isinstance(accepts[0], Options):
        raise _err(path, where, f"{_short(value)} is not allowed; expected one of "
                   f"{', '.join(sorted(accepts[0].values))}")
    raise _err(path, where, f"expected {describe_alternatives(accepts)}, got {_short(value)}")


def _table(path, where: str, value: Any) -> dict:
    if not isinstance(value, dict):
        raise _err(path, where, f"expected a table, got {type(value).__name__} {_short(value)}")
    return value


def parse_section(cls, table: Any, where: str, path) -> dict[str, Any]:
    """Check a TOML table against a section class's declared keys; return the checked values.

    Unknown keys are refused (listing the allowed ones), required keys must be present, and each
    value must satisfy its declared constraints.
    """
    table = _table(path, where, table)
    decl = {f.name: f for f in fields(cls) if f.metadata}
    for k in table:
        if k not in decl:
            raise _err(path, where, f"unknown key {k!r}; allowed keys: {', '.join(sorted(decl))}")
    out = {}
    for name, f in decl.items():
        if name not in table:
            if f.metadata.get("required"):
                raise _err(path, where, f"missing required key {name!r}")
            continue
        out[name] = _check(path, f"{where} {name}", f.metadata["accepts"], table[name])
    return out


def load_spec(path: str | Path, *, out: str | Path | None = None, check_store: bool = True) -> Spec:
    """Parse and validate a spec file.

    Parameters
    ----------
    path : path-like
        The TOML file.
    out : path-like, optional
        Override the run directory (``[run] out``).
    check_store : bool
        Require the store directory (and a chronology file) to exist.

    Returns
    -------
    Spec

    Raises
    ------
    SpecError
        Naming the file, the line, the key and what was expected.
    """
    path = Path(path).resolve()
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise SpecError(f"{path}: spec file not found") from None
    except IsADirectoryError:
        raise SpecError(f"{path}: is a directory, expected a spec file (TOML)") from None
    except OSError as exc:
        raise SpecError(f"{path}: cannot read the spec file: {exc.strerror}") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise SpecError(f"{path}, line {line}: not UTF-8 text (byte {exc.start}); save the spec "
                        "as UTF-8") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{path}: not valid TOML: {str(exc).splitlines()[0]}") from None
    try:
        return parse_spec(raw, path, out=out, check_store=check_store)
    except SpecError as exc:
        msg = str(exc)[len(str(path)) + 2:]
        line = _locate(text, msg)
        if line is None:
            raise
        raise SpecError(f"{path}, line {line}: {msg}") from None


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


def _date(path, where, value) -> str:
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        return value.isoformat()
    if not isinstance(value, str) or not re.match(r"^[0-9]{4}-[0-9]{2}-[0-9]{2}$", value):
        raise _err(path, where, f"expected a date YYYY-MM-DD, got {_short(value)}")
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
                   f"{'2009Q1' if freq == 'Q' else '2009-01'}, got {_short(value)}")
    return str(value)


def _inside(child: Path, parent: Path) -> bool:
    try:
        child.relative_to(parent)
    except ValueError:
        return False
    return True


def _run_section(raw, path: Path, base: Path, out, check_store: bool) -> RunSection:
    v = parse_section(RunSection, raw["run"], "[run]", path)
    store = (base / str(v["store"])).resolve()
    if check_store and not (store / "manifest.json").is_file():
        raise _err(path, "[run] store", f"no vintage store at {store} (create one with 'vintage-harness vintages "
                   "init')")
    out_dir = (Path(out).resolve() if out is not None else
               (base / str(v.get("out") or f"runs/{path.stem}")).resolve())
    if _inside(out_dir, store) or _inside(store, out_dir):
        raise _err(path, "[run] out", f"the run directory {out_dir} must lie outside the store {store} "
                   "(a store holds only its release log)")
    if out_dir.exists() and not out_dir.is_dir():
        raise _err(path, "[run] out", f"{out_dir} is a file; expected a directory for the run")
    cache = (base / str(v["cache"])).resolve() if v.get("cache") else None
    if cache is not None and (_inside(cache, store) or (cache.exists() and not cache.is_dir())):
        raise _err(path, "[run] cache", f"{cache} must be a directory outside the store {store}")
    return RunSection(store=store, out=out_dir, seed=v.get("seed", 0), draws=v.get("draws", 1000),
                      freq=v.get("freq", "Q"), policy=v.get("policy", "keep"),
                      mode=v.get("mode", "real-time"), cache=cache, name=v.get("name") or path.stem)


def _origins_section(raw, path: Path) -> OriginsSection:
    table = _table(path, "[origins]", raw["origins"])
    if "rule" not in table:
        raise _err(path, "[origins]", "missing required key 'rule' (after_release, explicit, monthly, "
                   "quarterly)")
    opts = {k: v for k, v in table.items() if k != "rule"}
    for k in ("start", "end"):
        if k in opts:
            opts[k] = _date(path, f"[origins] {k}", opts[k])
    if "dates" in opts:
        if not isinstance(opts["dates"], list) or not opts["dates"]:
            raise _err(path, "[origins] dates", "expected a non-empty list of dates")
        opts["dates"] = [_date(path, f"[origins] dates[{i}]", d) for i, d in enumerate(opts["dates"])]
    if "start" in opts and "end" in opts and opts["start"] > opts["end"]:
        raise _err(path, "[origins] end", f"end {opts['end']} lies before start {opts['start']}")
    from vintages import parse_schedule

    try:
        parse_schedule({"rule": table["rule"], **opts}, validate_only=True)
    except (ValueError, TypeError) as exc:
        raise _err(path, "[origins]", str(exc)) from None
    return OriginsSection(str(table["rule"]), opts)


def _variables_section(raw, path: Path, targets: list) -> dict[str, Any]:
    from vintages import CONVERSIONS, PARTIAL_POLICIES, TRANSFORMS, SeriesSpec

    variables = _table(path, "[variables]", raw["variables"])
    if not variables:
        raise _err(path, "[variables]", "expected at least one [variables.NAME] table")
    out = {}
    for vname, v in variables.items():
        where = f"[variables.{vname}]"
        if not _NAME.match(vname) or "-" in vname:
            raise _err(path, where, "variable names are letters, digits and '_'")
        v = _table(path, where, v)
        for k in v:
            if k not in VARIABLE_KEYS:
                raise _err(path, where, f"unknown key {k!r}; allowed keys: {', '.join(VARIABLE_KEYS)}")
        t = _check(path, f"{where} transform", (Options(*TRANSFORMS),), v.get("transform", "level"))
        conv = _check(path, f"{where} convert", (Options(*CONVERSIONS),), v["convert"]) if "convert" in v else None
        part = _check(path, f"{where} partial", (Options(*PARTIAL_POLICIES),), v["partial"]) if "partial" in v else None
        if conv is not None and part is None:
            # a partially observed quarter of a *target* would count as already observed and make
            # its nowcast degenerate: by default targets drop partial quarters, indicators keep them
            part = "drop" if vname in targets else "keep"
        out[vname] = SeriesSpec(transform=t, convert=conv, partial=part)
    return out


def _targets_section(raw, path: Path, variables: dict) -> TargetsSection:
    table = _table(path, "[targets]", raw["targets"])
    v = parse_section(TargetsSection, table, "[targets]", path)
    for t in v["variables"]:
        if t not in variables:
            raise _err(path, "[targets] variables", f"{t!r} is not among [variables]: "
                       f"{', '.join(sorted(variables))}")
    if len(set(v["variables"])) != len(v["variables"]):
        raise _err(path, "[targets] variables", "each target may appear once")
    h = table["horizons"]
    if isinstance(h, dict):
        for k in h:
            if k not in ("min", "max"):
                raise _err(path, "[targets] horizons", f"unknown key {k!r}; allowed keys: max, min")
        for k in ("min", "max"):
            if k not in h:
                raise _err(path, "[targets] horizons", f"missing required key {k!r}")
        lo = _check(path, "[targets] horizons.min", (_h(),), h["min"])
        hi = _check(path, "[targets] horizons.max", (_h(),), h["max"])
        if hi < lo:
            raise _err(path, "[targets] horizons", f"empty range: max {hi} < min {lo}")
        horizons = tuple(range(lo, hi + 1))
    else:
        horizons = tuple(sorted(set(v["horizons"])))
    return TargetsSection(tuple(v["variables"]), horizons)


def _h():
    from harness.constraints import Interval

    return Interval(int, -12, 40)


def _resolve_type(type_name: str, base: Path) -> str:
    """A model type ``file.py:Class`` becomes an absolute path (resolved relative to the spec)."""
    mod, sep, attr = type_name.partition(":")
    if sep and (mod.endswith(".py") or "/" in mod or "\\" in mod):
        return f"{(base / mod).resolve()}:{attr}"
    return type_name


def _models_section(raw, path: Path, base: Path) -> tuple[ModelSpec, ...]:
    from harness.constraints import coerce_toml, validate_params
    from harness.models.base import available_models, get_model_class

    models_raw = _table(path, "[models]", raw["models"])
    if not models_raw:
        raise _err(path, "[models]", "expected at least one [models.NAME] table")
    out = []
    for mname, m in models_raw.items():
        where = f"[models.{mname}]"
        if not _NAME.match(mname):
            raise _err(path, where, "model names are letters, digits, '_' and '-'")
        m = _table(path, where, m)
        if "type" not in m:
            raise _err(path, where, f"missing required key 'type' (one of {', '.join(available_models())} "
                       "or package.module:Class or path/to/file.py:Class)")
        if not isinstance(m["type"], str) or not m["type"]:
            raise _err(path, f"{where} type", f"expected a registered name or 'package.module:Class', "
                       f"got {_short(m['type'])}")
        type_name = _resolve_type(m["type"], base)
        params = {k: v for k, v in m.items() if k != "type"}
        try:
            cls = get_model_class(type_name)
        except Exception as exc:  # a user's module can fail to import in any way: name it, don't trace
            raise _err(path, f"{where} type", str(exc).splitlines()[0] if str(exc) else
                       type(exc).__name__) from None
        allowed = _init_params(cls)
        if allowed is not None:
            for k in params:
                if k not in allowed:
                    raise _err(path, where, f"unknown key {k!r}; parameters of {m['type']}: "
                               f"{', '.join(sorted(allowed)) or '(none)'}")
        try:
            params = {k: coerce_toml(cls, k, v) for k, v in params.items()}
            model = cls(**params)
            full = model.params() if callable(getattr(model, "params", None)) else params
            validate_params(cls, {**full, **params}, model=mname)
        except TypeError as exc:
            raise _err(path, where, f"bad parameters for {m['type']}: {exc}") from None
        except ValueError as exc:
            bad = re.search(r"parameter '([^']+)'", str(exc))
            raise _err(path, f"{where} {bad.group(1)}" if bad else where, str(exc)) from None
        out.append(ModelSpec(mname, type_name, params))
    return tuple(out)


def _init_params(cls) -> set[str] | None:
    """Keyword parameters a model class accepts (None when it takes ``**kwargs``)."""
    from harness.models.introspect import constructor_params

    return constructor_params(cls)


def _scoring_section(raw, path: Path, base: Path, models, variables, freq: str,
                     check_store: bool) -> ScoringSection:
    from vintages import parse_truth

    table = dict(_table(path, "[scoring]", raw.get("scoring", {})))
    v = parse_section(ScoringSection, table, "[scoring]", path)
    names = [m.name for m in models]
    bench = v.get("benchmark") or names[0]
    if bench not in names:
        raise _err(path, "[scoring] benchmark", f"{bench!r} is not a model of this spec; models: "
                   f"{', '.join(sorted(names))}")
    truths = v.get("truths", ("first", "latest"))
    truths = (truths,) if isinstance(truths, str) else tuple(truths)
    if not truths:
        raise _err(path, "[scoring] truths", "expected at least one truth rule")
    for i, t in enumerate(truths):
        try:
            truths = truths[:i] + (str(parse_truth(t)),) + truths[i + 1:]
        except ValueError as exc:
            raise _err(path, "[scoring] truths", str(exc)) from None
    truth = v.get("truth") or truths[0]
    try:
        truth = str(parse_truth(truth))
    except ValueError as exc:
        raise _err(path, "[scoring] truth", str(exc)) from None
    if truth not in truths:
        truths = (truth,) + truths
    chron = None
    if v.get("chronology"):
        chron = (base / str(v["chronology"])).resolve()
        if check_store and not chron.is_file():
            raise _err(path, "[scoring] chronology", f"file not found: {chron}")
    cyc = v.get("cycle_variable")
    if cyc is not None and cyc not in variables:
        raise _err(path, "[scoring] cycle_variable", f"{cyc!r} is not among [variables]")
    subs = []
    for sname, rng in (table.get("subperiods") or {}).items():
        where = f"[scoring.subperiods] {sname}"
        if sname in ("full", "recession", "expansion"):
            raise _err(path, where, "'full', 'recession' and 'expansion' are reserved names")
        if not isinstance(rng, list) or len(rng) != 2:
            raise _err(path, where, "expected [START, END] periods, e.g. [\"2009Q1\", \"2010Q2\"]")
        a, b = (_period(path, where, x, freq) for x in rng)
        from vintages import parse_periods

        (oa, ob), _ = parse_periods([a, b])
        if oa > ob:
            raise _err(path, where, f"starts ({a}) after it ends ({b}); expected [START, END]")
        subs.append(SubPeriod(str(sname), a, b))
    tests = {}
    for tname, settings in (table.get("tests") or {}).items():
        from harness.compare.registry import get_test

        where = f"[scoring.tests.{tname}]"
        try:
            test = get_test(tname)
            tests[tname] = dict(test.settings(_table(path, where, settings)))
        except ValueError as exc:
            raise _err(path, where, str(exc)) from None
    levels = {}
    for k in ("quantile_levels", "coverage_levels", "interval_levels"):
        if v.get(k) is not None:
            lv = tuple(v[k])
            pct = [round(a * 100) for a in lv]
            if any(abs(a * 100 - p) > 1e-9 for a, p in zip(lv, pct, strict=True)) or len(set(pct)) != len(pct):
                raise _err(path, f"[scoring] {k}", "expected distinct whole percentages, e.g. [0.5, 0.8]")
            levels[k] = lv
    return ScoringSection(benchmark=bench, truths=truths, truth=truth, chronology=chron,
                          cycle_variable=cyc, min_phase=v.get("min_phase"), min_cycle=v.get("min_cycle"),
                          subperiods=tuple(subs), tests=tests, **levels)


def _pools_section(raw, path: Path, models) -> tuple[PoolSpec, ...]:
    from vintages import parse_truth

    table = _table(path, "[pools]", raw.get("pools", {}))
    names = [m.name for m in models]
    out = []
    for pname, p in table.items():
        where = f"[pools.{pname}]"
        v = parse_section(PoolSpec, {"name": pname, **_table(path, where, p)}, where, path)
        if pname in names:
            raise _err(path, where, f"the pool's name {pname!r} is already a model's; choose another")
        members = tuple(v.get("members") or names)
        unknown = [m for m in members if m not in names]
        if unknown:
            raise _err(path, f"{where} members", f"{unknown} are not models of this spec; models: "
                       f"{', '.join(names)}")
        if len(set(members)) < 2:
            raise _err(path, f"{where} members", f"a pool needs at least two distinct models; got "
                       f"{list(members)}")
        if len(set(members)) != len(members):
            raise _err(path, f"{where} members", "each model may appear once")
        try:
            truth = parse_truth(v.get("truth", "first"))
        except ValueError as exc:
            raise _err(path, f"{where} truth", str(exc)) from None
        if truth.kind == "latest":
            raise _err(path, f"{where} truth", "'latest' is not a real-time truth (it is fixed only at "
                       "the store's last release); use first, release:K, lag:NNND or asof:DATE")
        if v.get("score") is not None and v.get("scheme", "equal") != "inverse_score":
            raise _err(path, f"{where} score", "applies to scheme = \"inverse_score\" only")
        out.append(PoolSpec(name=pname, scheme=v.get("scheme", "equal"), members=members,
                            window=v.get("window"), min_scored=v.get("min_scored", 8),
                            score=v.get("score"), truth=str(truth)))
    return tuple(out)


def parse_spec(raw: dict, path: str | Path = "<spec>", *, out=None, check_store: bool = True) -> Spec:
    """Validate an already-parsed spec dictionary (see :func:`load_spec`)."""
    path = Path(path)
    base = path.parent if path.name != "<spec>" else Path.cwd()
    if not isinstance(raw, dict):
        raise _err(path, "top level", "expected TOML tables")
    for k in raw:
        if k not in SECTION_KEYS:
            raise _err(path, "top level", f"unknown key {k!r}; allowed keys: {', '.join(SECTION_KEYS)}")
    for k in REQUIRED_SECTIONS:
        if k not in raw:
            raise _err(path, "top level", f"missing required key {k!r}")
    run = _run_section(raw, path, base, out, check_store)
    origins = _origins_section(raw, path)
    tg = raw["targets"] if isinstance(raw["targets"], dict) else {}
    listed = tg.get("variables", []) if isinstance(tg.get("variables", []), list) else []
    variables = _variables_section(raw, path, listed)
    targets = _targets_section(raw, path, variables)
    models = _models_section(raw, path, base)
    pools = _pools_section(raw, path, models)
    scoring = _scoring_section(raw, path, base, models + tuple(ModelSpec(p.name, f"pool:{p.scheme}", {})
                                                               for p in pools),
                               variables, run.freq, check_store)
    return Spec(path=path, raw=raw, run=run, origins=origins, variables=variables, targets=targets,
                models=models, scoring=scoring, pools=pools)
