"""The spec's sections as frozen, typed dataclasses: every accepted key is a field, and every field is used.

Each field's ``metadata`` declares the values it accepts (constraints of
:mod:`harness.constraints`) and one line of documentation; :func:`harness.spec.load.parse_section`
builds a section from a TOML table by reading those declarations, so an unknown key cannot be
accepted and a bad value is refused with the key, its line and the allowed values.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from harness.constraints import Interval, JSONTable, ListOf, Options, Text

NAME = r"[A-Za-z][A-Za-z0-9_\-]{0,63}"
#: largest number of draws per forecast a spec may ask for (memory: a task holds targets ×
#: horizons × draws float64 draws; 200,000 draws of 2 targets × 9 horizons is 29 MB)
MAX_DRAWS = 200_000


def key(*accepts, doc: str, default: Any = ..., required: bool = False):
    """A spec key: its accepted values, its documentation and its default (``...`` = required)."""
    kw = {"metadata": {"accepts": accepts, "doc": doc, "required": required or default is ...}}
    if default is not ...:
        kw["default"] = default
    return field(**kw)


@dataclass(frozen=True)
class RunSection:
    """``[run]``: where the data and the run live, and how every task draws."""

    store: Path = key(Text(what="a path"), doc="the vintage store (relative to the spec file)")
    out: Path | None = key(Text(what="a path"), None,
                           doc="the run directory (default runs/<spec name>)", default=None)
    seed: int = key(Interval(int, 0, 2**63 - 1), doc="the one seed every task's stream spawns from",
                    default=0)
    draws: int = key(Interval(int, 10, MAX_DRAWS), doc="predictive draws per forecast", default=1000)
    freq: str = key(Options("M", "Q"), doc="panel frequency", default="Q")
    policy: str = key(Options("balance", "keep", "realign"), doc="ragged-edge policy", default="keep")
    mode: str = key(Options("pseudo", "real-time"),
                    doc="real-time (the vintage of each origin) or pseudo (latest data cut at the "
                        "real-time ragged edge)", default="real-time")
    cache: Path | None = key(Text(what="a path"), None,
                             doc="task cache directory, shared by every run of the store (default: "
                                 "$HARNESS_CACHE, else .harness-cache beside the store)", default=None)
    name: str | None = key(Text(NAME, "a name (letters, digits, '_', '-')"), None,
                           doc="the run's name (default the spec file's stem)", default=None)


#: environment variable naming the task cache of every spec that does not set ``[run] cache``
CACHE_ENV = "HARNESS_CACHE"
#: name of the default task cache, a sibling of the store directory
CACHE_NAME = ".harness-cache"


def cache_location(run: RunSection) -> Path:
    """The task cache of a run: ``[run] cache``, else ``$HARNESS_CACHE``, else ``.harness-cache`` beside the store.

    The default sits next to the store (never inside it: a store holds releases only), so every
    spec and run directory on that store shares one cache, and on a cluster it is on the shared
    storage wherever the store is. The spec's key is the most specific statement and wins; the
    environment variable sets a per-machine or per-session default (e.g. a scratch disk).
    """
    if run.cache is not None:
        return Path(run.cache)
    env = os.environ.get(CACHE_ENV, "").strip()
    if env:
        return Path(env).expanduser().resolve()
    return Path(run.store).parent / CACHE_NAME


@dataclass(frozen=True)
class TargetsSection:
    """``[targets]``: what to forecast."""

    variables: tuple[str, ...] = key(ListOf(Text(NAME, "a variable name")),
                                     doc="target variables (among [variables])")
    horizons: tuple[int, ...] = key(ListOf(Interval(int, -12, 40)), JSONTable(),
                                    doc="horizons: a list, or {min = a, max = b}; h<0 backcast, 0 "
                                        "nowcast, >0 forecast (within -12…40)")


@dataclass(frozen=True)
class ModelSpec:
    """``[models.NAME]``: one model: its label, type (registered name or path) and parameters."""

    name: str
    type: str
    params: dict[str, Any]


@dataclass(frozen=True)
class SubPeriod:
    """A named range of target periods ``[start, end]`` (inclusive)."""

    name: str
    start: str
    end: str


@dataclass(frozen=True)
class ScoringSection:
    """``[scoring]``: the benchmark, the truths, the sub-periods and the test settings."""

    benchmark: str | None = key(Text(NAME, "a model name"), None,
                                doc="the incumbent every model is set against (default the first "
                                    "model)", default=None)
    truths: tuple[str, ...] = key(ListOf(Text(what="a truth rule")), Text(what="a truth rule"),
                                  doc="truths to score against (first, release:K, lag:NNND, latest, "
                                      "asof:YYYY-MM-DD)", default=("first", "latest"))
    truth: str | None = key(Text(what="a truth rule"), None,
                            doc="the headline truth (default the first of truths)", default=None)
    chronology: Path | None = key(Text(what="a path"), None,
                                  doc="peak,trough CSV of recessions (default: Harding–Pagan dating)",
                                  default=None)
    cycle_variable: str | None = key(Text(NAME, "a variable name"), None,
                                     doc="variable dated by Harding–Pagan when there is no chronology",
                                     default=None)
    min_phase: int | None = key(Interval(int, 1, 40), None,
                                doc="Harding–Pagan minimum phase, periods (default 2)", default=None)
    min_cycle: int | None = key(Interval(int, 2, 80), None,
                                doc="Harding–Pagan minimum cycle, periods (default 5)", default=None)
    subperiods: tuple[SubPeriod, ...] = key(JSONTable(), doc="named ranges NAME = [START, END]",
                                            default=())
    quantile_levels: tuple[float, ...] | None = key(ListOf(Interval(float, 0, 1, "neither")), None,
                                                    doc="levels of the quantile scores", default=None)
    coverage_levels: tuple[float, ...] | None = key(ListOf(Interval(float, 0, 1, "neither")), None,
                                                    doc="nominal coverages of the interval hits",
                                                    default=None)
    interval_levels: tuple[float, ...] | None = key(ListOf(Interval(float, 0, 1, "neither")), None,
                                                    doc="nominal coverages of the interval scores",
                                                    default=None)
    tests: dict[str, dict[str, Any]] | None = key(JSONTable(), None,
                                                  doc="settings per registered test, e.g. "
                                                      "[scoring.tests.mcs] n_boot = 2000", default=None)

    def as_dict(self) -> dict[str, Any]:
        """JSON-able form (the run manifest stores it)."""
        d = {f.name: getattr(self, f.name) for f in fields(self)}
        d["chronology"] = None if self.chronology is None else str(self.chronology)
        d["subperiods"] = {s.name: [s.start, s.end] for s in self.subperiods}
        for k in ("truths", "quantile_levels", "coverage_levels", "interval_levels"):
            if d[k] is not None:
                d[k] = list(d[k])
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> ScoringSection:
        """Inverse of :meth:`as_dict` (no validation: the manifest was written from a valid spec)."""
        kw = dict(d)
        kw["chronology"] = None if kw.get("chronology") in (None, "") else Path(kw["chronology"])
        kw["subperiods"] = tuple(SubPeriod(n, str(a), str(b)) for n, (a, b) in
                                 (kw.get("subperiods") or {}).items())
        for k in ("truths", "quantile_levels", "coverage_levels", "interval_levels"):
            if kw.get(k) is not None:
                kw[k] = tuple(kw[k])
        kw["tests"] = dict(kw.get("tests") or {})
        names = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in kw.items() if k in names})

    @property
    def subperiod_map(self) -> dict[str, tuple[str, str]]:
        """``{name: (start, end)}`` of the custom sub-periods."""
        return {s.name: (s.start, s.end) for s in self.subperiods}


@dataclass(frozen=True)
class PoolSpec:
    """``[pools.NAME]``: a real-time combination of models of the run, scored like a model.

    Weights at each origin use only forecasts whose ``truth`` (a real-time truth rule) had been
    published by then; until ``min_scored`` such forecasts exist equal weights apply (reported).
    """

    name: str = key(Text(NAME, "a name"), doc="the pool's name (a new model label)")
    scheme: str = key(Options("equal", "inverse_score", "optimal"),
                      doc="equal weights, weights proportional to inverse mean score over a "
                          "trailing window, or the optimal linear pool (average log score)",
                      default="equal")
    members: tuple[str, ...] | None = key(ListOf(Text(NAME, "a model name"), min_len=2), None,
                                          doc="models to pool (default every model)", default=None)
    window: int | None = key(Interval(int, 1, 10_000), None,
                             doc="trailing window of scored forecasts (default all so far)", default=None)
    min_scored: int = key(Interval(int, 1, 10_000),
                          doc="scored forecasts needed before learnt weights replace equal ones",
                          default=8)
    score: str | None = key(Options("crps", "log_score", "se_mean", "ae_mean"), None,
                            doc="score of the inverse-score weights (default crps)", default=None)
    truth: str = key(Text(what="a truth rule"), doc="real-time truth the weights learn from "
                     "(first, release:K, lag:NNND, asof:DATE; not latest)", default="first")


def section_keys(cls) -> dict[str, dict]:
    """``{key: metadata}`` of a section class (its accepted keys, constraints and docs)."""
    return {f.name: dict(f.metadata) for f in fields(cls) if f.metadata}
