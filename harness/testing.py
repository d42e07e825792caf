"""Conformance checks for forecasting models, and small builders of synthetic information sets.

:func:`check_model` runs every ``check_*`` function of this module against one model (in the
spirit of scikit-learn's ``check_estimator``) and returns a :class:`CheckReport`: each check,
passed, failed or skipped, and why. ``report.raise_if_failed()`` (or ``strict=True``) raises one
``AssertionError`` naming every failed check, for tests. :func:`model_checks` yields the checks
one by one; :func:`registered_cases` lists the check cases of every registered model (each
class's :meth:`~harness.models.base.BaseModel.check_cases`), for ``pytest.mark.parametrize``.

The laws checked:

* the draws satisfy the output contract (:func:`harness.models.contract.validate_forecast`):
  dims ``(draw, variable, horizon)``, the declared coordinates, float64, all finite;
* the same seed gives identical draws, whatever the global NumPy random state; another seed
  gives different draws;
* the model pickles, before and after a forecast, and the copy forecasts identically;
* ``type(model)(**model.params())`` forecasts identically, and ``params()`` is JSON-able;
* the model reads only the information set: a copy of the panel stripped of attributes and
  extra coordinates gives identical draws, trailing all-NaN periods change nothing (or raise a
  ``ValueError``), and the information set is not modified;
* targets already published are returned as their published value in every draw;
* a cell flagged partial (``InfoSet.partial``) is treated exactly like a missing one;
* on a noise-free deterministic path (a straight line per variable, unless the case says
  otherwise) the draws centre on the path's continuation at each target's own period: a model
  that is one horizon off fails;
* a one-period information set raises :class:`harness.models.InsufficientDataError`.

Example
-------
>>> from harness.models import AutoRegression
>>> report = check_model(AutoRegression())                       # doctest: +SKIP
>>> print(report)                                                # doctest: +SKIP
model 'ar': 12 passed, 0 failed, 0 skipped
  pass  check_attributes  ...
>>> report.raise_if_failed()                                     # doctest: +SKIP
"""

from __future__ import annotations

import functools
import json
import pickle
import time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, replace
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

from harness.models.contract import (
    EXACT_PATHS,
    CheckCase,
    check_cases_of,
    model_label,
    validate_forecast,
)
from harness.models.errors import InsufficientDataError
from vintages import InfoSet, Targets

__all__ = [
    "CheckCase",
    "CheckReport",
    "CheckResult",
    "SkipCheck",
    "check_model",
    "default_case",
    "make_infoset",
    "make_targets",
    "model_checks",
    "registered_cases",
    "simulated_panel",
]

_DRAWS = 64


class SkipCheck(Exception):  # noqa: N818 - a signal, like unittest.SkipTest
    """Raised by a check that does not apply to the case; the message says why."""


def make_infoset(values: np.ndarray, variables: list[str] | tuple[str, ...], start: str = "1990Q1",
                 freq: str = "Q", origin: Any = None, policy: str = "keep") -> InfoSet:
    """A synthetic information set from a ``(T, n)`` array (NaN = not observed).

    Parameters
    ----------
    values : array-like (T, n)
        Rows are consecutive periods from ``start``; trailing NaN make a ragged edge.
    variables : sequence of str
        Column names.
    start : str, default "1990Q1"
        First period (a pandas period label of ``freq``).
    freq : {"Q", "M"}, default "Q"
    origin : date-like, optional
        The origin day. Default: the first day of the period after the last row, so the current
        period (horizon 0) is the first period without data.
    policy : str, default "keep"

    Returns
    -------
    InfoSet

    Raises
    ------
    ValueError
        If shapes disagree, ``freq`` is unknown, or the panel holds periods after the origin's.
    """
    if freq not in ("M", "Q"):
        raise ValueError(f"make_infoset: freq must be one of ['M', 'Q'], got {freq!r}")
    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 2 or x.shape[1] != len(variables):
        raise ValueError(f"make_infoset: values must be (T, {len(variables)}) for variables "
                         f"{list(variables)}, got shape {x.shape}")
    periods = pd.period_range(start=start, periods=x.shape[0], freq=freq)
    if origin is None:
        current = periods[-1] + 1
        origin_day = np.datetime64(current.start_time.date(), "D")
    else:
        origin_day = np.datetime64(pd.Timestamp(origin).date(), "D")
        current = pd.Period(pd.Timestamp(origin_day), freq=freq)
        if len(periods) and periods[-1] > current:
            raise ValueError(f"make_infoset: the panel ends at {periods[-1]}, after the origin's "
                             f"period {current} (origin {origin_day})")
    panel = xr.DataArray(x, dims=("period", "variable"),
                         coords={"period": periods, "variable": [str(v) for v in variables]})
    last, src = {}, {}
    for j, v in enumerate(variables):
        ok = np.flatnonzero(np.isfinite(x[:, j]))
        if len(ok):
            last[str(v)] = periods[ok[-1]]
            src[str(v)] = origin_day
    return InfoSet(origin=origin_day, freq=freq, panel=panel, current=current, last_observed=last,
                   source_release=src, policy=policy, transforms={str(v): "none" for v in variables})


def make_targets(info: InfoSet, variables: list[str] | tuple[str, ...] | None = None,
                 horizons: tuple[int, ...] = (0, 1, 4)) -> Targets:
    """Targets for an information set (all its variables by default)."""
    vs = tuple(info.variables if variables is None else variables)
    return Targets(variables=vs, horizons=tuple(int(h) for h in horizons), freq=info.freq,
                   current=info.current)


def simulated_panel(n_periods: int = 80, n_vars: int = 3, seed: int = 0, ragged: bool = True
                    ) -> np.ndarray:
    """A stable simulated VAR(1) panel ``(T, n)``; with ``ragged`` the last row keeps only column 0.

    The process is the invented "Veldmark" toy economy of the tests (not real data).
    """
    rng = np.random.default_rng(seed)
    a = 0.5 * np.eye(n_vars) + 0.1 * np.tri(n_vars, k=-1)
    c = np.linspace(0.5, 1.5, n_vars)
    y = np.zeros((n_periods, n_vars))
    y[0] = c / (1 - 0.5)
    e = rng.standard_normal((n_periods, n_vars)) * 0.5
    for t in range(1, n_periods):
        y[t] = c + a @ y[t - 1] + e[t]
    if ragged and n_vars > 1:
        y[-1, 1:] = np.nan
    return y


def default_case(info: InfoSet | None = None, targets: Targets | None = None
                 ) -> tuple[InfoSet, Targets]:
    """The information set and targets the checks use unless told otherwise.

    A simulated 3-variable (``output``, ``prices``, ``jobs``), 80-quarter VAR(1) panel whose last
    row keeps only ``output``; targets: ``output`` and ``prices`` at horizons ``(-1, 0, 1, 4)``
    (horizon -1 is the last panel row: published for ``output``, not for ``prices``).
    """
    if info is None:
        info = make_infoset(simulated_panel(), ["output", "prices", "jobs"])
    if targets is None:
        targets = make_targets(info, info.variables[:2], (-1, 0, 1, 4))
    return info, targets


def _run(model, info: InfoSet, targets: Targets, seed: int = 1, n_draws: int = _DRAWS) -> xr.DataArray:
    return model.forecast(info, targets, n_draws, np.random.default_rng(seed))


def _panel_like(info: InfoSet, values: np.ndarray) -> xr.DataArray:
    """A bare panel (no attributes, no extra coordinates) with ``info``'s periods and variables."""
    return xr.DataArray(values, dims=("period", "variable"),
                        coords={"period": info.periods.copy(), "variable": list(info.variables)})


def _partial(info: InfoSet) -> np.ndarray:
    from harness.models.base import partial_mask

    return partial_mask(info)


# ---------------------------------------------------------------------------- checks
def check_attributes(model, info: InfoSet, targets: Targets) -> None:
    """The model has string ``name``/``version``, and its constructor stores ``params()`` unchanged."""
    assert isinstance(getattr(model, "name", None), str) and model.name, "missing name"
    assert isinstance(getattr(model, "version", None), str), "missing version"
    params = model.params()
    assert isinstance(params, dict), "params() must return a dict"
    twin = type(model)(**params)
    for k, v in params.items():
        assert getattr(twin, k) is v, f"the constructor does not store parameter {k!r} unchanged"
    assert not [k for k in vars(twin) if k.endswith("_") and not k.startswith("_")], \
        "the constructor sets learned state (attributes ending in '_')"


def check_output_contract(model, info: InfoSet, targets: Targets) -> None:
    """Draws satisfy the output contract: dims, target coordinates, draw count, float64, finite."""
    validate_forecast(_run(model, info, targets), targets, _DRAWS, model=model)


def check_seed_determinism(model, info: InfoSet, targets: Targets) -> None:
    """The same seed gives identical draws, whatever the global NumPy random state."""
    # the legacy global state is set on purpose: a model must not depend on it
    np.random.seed(11)  # noqa: NPY002
    a = _run(model, info, targets, seed=5)
    np.random.seed(12)  # noqa: NPY002
    b = _run(model, info, targets, seed=5)
    np.testing.assert_array_equal(a.values, b.values)


def check_seed_sensitivity(model, info: InfoSet, targets: Targets) -> None:
    """Different seeds give different draws for targets not yet observed."""
    a = _run(model, info, targets, seed=5).values
    b = _run(model, info, targets, seed=6).values
    assert not np.array_equal(a, b), "draws do not depend on the seed"


def check_pickle(model, info: InfoSet, targets: Targets) -> None:
    """The model pickles before and after a forecast, and the copy forecasts identically."""
    fresh = pickle.loads(pickle.dumps(model))
    ref = _run(model, info, targets)
    fitted = pickle.loads(pickle.dumps(model))
    np.testing.assert_array_equal(_run(fresh, info, targets).values, ref.values)
    np.testing.assert_array_equal(_run(fitted, info, targets).values, ref.values)


def check_params_roundtrip(model, info: InfoSet, targets: Targets) -> None:
    """``params()`` is JSON-able and ``type(model)(**params)`` forecasts identically."""
    params = model.params()
    json.dumps(params)
    twin = type(model)(**params)
    np.testing.assert_array_equal(_run(twin, info, targets).values, _run(model, info, targets).values)


def check_reads_only_infoset(model, info: InfoSet, targets: Targets) -> None:
    """A stripped copy of the panel gives identical draws, and the info set is left unmodified."""
    before = info.values().copy()
    ref = _run(model, info, targets).values
    np.testing.assert_array_equal(info.values(), before, err_msg="forecast modified the panel")
    bare = _panel_like(info, info.values().copy())
    # partial flags are information (which cells are published), not provenance: they stay
    flags = None if info.partial is None else _panel_like(info, _partial(info))
    stripped = replace(info, panel=bare, partial=flags,
                       source_release={k: np.datetime64("NaT") for k in info.source_release})
    np.testing.assert_array_equal(_run(model, stripped, targets).values, ref)


def check_trailing_nan(model, info: InfoSet, targets: Targets) -> None:
    """Trailing all-NaN periods in the panel change nothing, or raise a ValueError."""
    ref = _run(model, info, targets).values
    extra = 2
    vals = np.concatenate([info.values(), np.full((extra, len(info.variables)), np.nan)])
    periods = pd.period_range(start=info.periods[0], periods=len(vals), freq=info.freq)
    panel = xr.DataArray(vals, dims=("period", "variable"),
                         coords={"period": periods, "variable": list(info.variables)})
    flags = None
    if info.partial is not None:
        flags = xr.DataArray(np.concatenate([_partial(info), np.zeros((extra, vals.shape[1]), bool)]),
                             dims=("period", "variable"),
                             coords={"period": periods, "variable": list(info.variables)})
    current = max(info.current, periods[-1])
    padded = replace(info, panel=panel, current=current, partial=flags)
    shift = current.ordinal - info.current.ordinal
    moved = replace(targets, current=current,
                    horizons=tuple(int(h) - shift for h in targets.horizons))
    try:
        out = _run(model, padded, moved).values
    except ValueError:
        return
    np.testing.assert_array_equal(out, ref)


def _target_row(info: InfoSet, targets: Targets, v: str, h: int) -> int:
    """Panel row holding target ``v`` at horizon ``h``.

    A realigned panel holds reference period p in the row labelled p + shift; on a native
    (monthly) axis a quarterly target sits at its quarter's last month.
    """
    first = info.periods[0]
    shifts = getattr(info, "shifts", None) or {}
    period = targets.current + int(h)
    if info.freq == "M" and targets.freq == "Q":
        return 3 * period.ordinal + 2 - first.ordinal
    return period.ordinal + int(shifts.get(v, 0)) - first.ordinal


def _published(info: InfoSet, targets: Targets) -> list[tuple[int, int, float]]:
    """``(target variable, horizon index, value)`` of every target already published in ``info``."""
    vals = info.values()
    left_out = _partial(info)
    found = []
    for j, v in enumerate(targets.variables):
        col = info.variables.index(v)
        for k, h in enumerate(targets.horizons):
            row = _target_row(info, targets, v, h)
            if 0 <= row < len(vals) and np.isfinite(vals[row, col]) and not left_out[row, col]:
                found.append((j, k, float(vals[row, col])))
    return found


def check_observed_targets(model, info: InfoSet, targets: Targets) -> None:
    """Targets already published are returned as their published value in every draw."""
    out = _run(model, info, targets)
    found = _published(info, targets)
    for j, k, value in found:
        got = out.values[:, j, k]
        assert np.all(got == value), (f"{targets.variables[j]} at h={targets.horizons[k]}: "
                                      f"published value {value} not reproduced")
    assert found, "the check needs targets with an observed period"


def check_partial_is_unobserved(model, info: InfoSet, targets: Targets) -> None:
    """Flagging a published target cell as a partial quarter gives the draws of a missing cell."""
    found = _published(info, targets)
    if not found:
        raise SkipCheck("no published target to flag as partial")
    j, k, _ = found[0]
    v = targets.variables[j]
    col = info.variables.index(v)
    row = _target_row(info, targets, v, targets.horizons[k])
    flags = _partial(info).copy()
    flags[row, col] = True
    flagged = replace(info, partial=_panel_like(info, flags))
    vals = info.values().copy()
    vals[row, col] = np.nan
    missing = replace(info, panel=_panel_like(info, vals),
                      partial=None if info.partial is None else _panel_like(info, _partial(info)))
    a = _run(model, flagged, targets).values
    b = _run(model, missing, targets).values
    assert not np.all(a[:, j, k] == a[0, j, k]), (
        f"{v} at h={targets.horizons[k]}: a partial quarter was returned as a published value")
    np.testing.assert_array_equal(a, b, err_msg=f"flagging {v} at row {row} as partial differs "
                                                f"from leaving it out")


# slopes (per period) and levels of the deterministic paths, per variable (cycled)
_SLOPES = (1.0, -1.5, 2.0, -0.5)
_LEVELS = (10.0, 30.0, -20.0, 5.0)


def check_deterministic_trend(model, info: InfoSet, targets: Targets,
                              exact_path: str | None = "linear") -> None:
    """On a noise-free deterministic path the draws centre on its continuation at each target period."""
    if exact_path is None:
        raise SkipCheck("the case declares no deterministic path the model continues exactly")
    if exact_path not in EXACT_PATHS:
        raise ValueError(f"exact_path must be one of {sorted(EXACT_PATHS)} or None, "
                         f"got {exact_path!r}")
    n = len(info.variables)
    slope = np.array([_SLOPES[j % len(_SLOPES)] for j in range(n)])
    if exact_path == "constant":
        slope = np.zeros(n)
    level = np.array([_LEVELS[j % len(_LEVELS)] for j in range(n)])
    shifts = getattr(info, "shifts", None) or {}
    shift = np.array([int(shifts.get(v, 0)) for v in info.variables])
    p0 = info.periods[0].ordinal
    ref_period = np.asarray(info.periods.asi8)[:, None] - shift[None, :]  # reference period of each cell
    path = level[None, :] + slope[None, :] * (ref_period - p0)
    vals = np.where(np.isfinite(info.values()), path, np.nan)
    trend = replace(info, panel=_panel_like(info, vals),
                    partial=None if info.partial is None else _panel_like(info, _partial(info)))
    out = _run(model, trend, targets).values
    centre = np.median(out, axis=0)
    # tolerance: a tenth of the variable's step per period on the linear path (so a model one
    # horizon off misses by ten tolerances); the constant path uses the same absolute tolerance
    unit = np.abs(np.array([_SLOPES[j % len(_SLOPES)] for j in range(n)]))
    problems = []
    for j, v in enumerate(targets.variables):
        col = info.variables.index(v)
        for k, h in enumerate(targets.horizons):
            p = (targets.current + int(h)).ordinal
            want = level[col] + slope[col] * (p - p0)
            tol = 0.1 * unit[col]
            err = centre[j, k] - want
            if not abs(err) <= tol:
                off = f" = {err / slope[col]:+.2f} periods of the path" if slope[col] else ""
                problems.append(f"{v} at h={int(h)} ({targets.current + int(h)}): median draw "
                                f"{centre[j, k]:.4g}, the {exact_path} path continues at "
                                f"{want:.4g} (off by {err:+.3g}{off}; tolerance {tol:.3g})")
    assert not problems, "; ".join(problems)


def check_insufficient_data(model, info: InfoSet, targets: Targets) -> None:
    """A one-period information set raises InsufficientDataError (never NaN draws)."""
    vals = info.values()[:1]
    short = make_infoset(vals, info.variables, start=str(info.periods[0]), freq=info.freq)
    tg = make_targets(short, targets.variables, (1, 2))
    try:
        _run(model, short, tg)
    except InsufficientDataError:
        return
    raise AssertionError("no InsufficientDataError for a one-period information set")


_CHECKS: tuple[Callable[..., None], ...] = (
    check_attributes,
    check_output_contract,
    check_seed_determinism,
    check_seed_sensitivity,
    check_pickle,
    check_params_roundtrip,
    check_reads_only_infoset,
    check_trailing_nan,
    check_observed_targets,
    check_partial_is_unobserved,
    check_deterministic_trend,
    check_insufficient_data,
)


def model_checks() -> Iterator[Callable[..., None]]:
    """The check functions, each called as ``check(model, info, targets)``.

    :func:`check_deterministic_trend` also takes ``exact_path=`` (default ``"linear"``). A
    check raises ``AssertionError`` (or any exception) on failure and :class:`SkipCheck` when
    it does not apply.
    """
    yield from _CHECKS


# ---------------------------------------------------------------------------- the report
Status = Literal["passed", "failed", "skipped"]


@dataclass(frozen=True)
class CheckResult:
    """One check's outcome.

    Attributes
    ----------
    name : str
        The check function's name.
    status : {"passed", "failed", "skipped"}
    message : str
        Why it failed (``ExceptionType: message``) or was skipped; empty when it passed.
    doc : str
        What the check verifies (its docstring's first line).
    seconds : float
        Time taken.
    """

    name: str
    status: Status
    message: str = ""
    doc: str = ""
    seconds: float = 0.0

    @property
    def passed(self) -> bool:
        return self.status == "passed"

    def __str__(self) -> str:
        tag = {"passed": "pass", "failed": "FAIL", "skipped": "skip"}[self.status]
        return f"{tag}  {self.name}: {self.message}" if self.message else f"{tag}  {self.name}"


@dataclass(frozen=True)
class CheckReport:
    """What :func:`check_model` found: every check, passed, failed or skipped, and why.

    Attributes
    ----------
    model : str
        The model's name.
    case : str or None
        The check case's id, when run from a :class:`CheckCase`.
    results : tuple of CheckResult
        In the order the checks ran.
    """

    model: str
    case: str | None
    results: tuple[CheckResult, ...]

    @property
    def ok(self) -> bool:
        """True when no check failed (skipped checks do not count against the model)."""
        return not self.failed

    @property
    def failed(self) -> list[CheckResult]:
        return [r for r in self.results if r.status == "failed"]

    @property
    def skipped(self) -> list[CheckResult]:
        return [r for r in self.results if r.status == "skipped"]

    def __getitem__(self, name: str) -> CheckResult:
        for r in self.results:
            if r.name == name:
                return r
        raise KeyError(f"no check named {name!r}; checks run: {[r.name for r in self.results]}")

    def _title(self) -> str:
        case = f" (case {self.case!r})" if self.case and self.case != self.model else ""
        counts = {s: sum(r.status == s for r in self.results) for s in ("passed", "failed", "skipped")}
        return (f"model {self.model!r}{case}: {counts['passed']} passed, {counts['failed']} failed, "
                f"{counts['skipped']} skipped")

    def __str__(self) -> str:
        return "\n".join([self._title()] + [f"  {r}" for r in self.results])

    def raise_if_failed(self) -> CheckReport:
        """Raise ``AssertionError`` listing every failed check; return the report otherwise."""
        if self.failed:
            case = f" (case {self.case!r})" if self.case and self.case != self.model else ""
            raise AssertionError(f"model {self.model!r}{case} failed {len(self.failed)} check(s):\n  "
                                 + "\n  ".join(f"{r.name}: {r.message}" for r in self.failed))
        return self


def check_model(model, info: InfoSet | None = None, targets: Targets | None = None, *,
                exact_path: str | None = "linear", strict: bool = False,
                checks: Iterable[Callable[..., None]] | None = None) -> CheckReport:
    """Run every conformance check against ``model`` and report each outcome.

    Parameters
    ----------
    model : ForecastModel or CheckCase
        The model (unfitted; it is forecast several times), or a :class:`CheckCase`, whose
        model, information set, targets and ``exact_path`` are then used.
    info : InfoSet, optional
        The information set; default :func:`default_case`'s simulated panel.
    targets : Targets, optional
        Default: the first two variables at horizons ``(-1, 0, 1, 4)``.
    exact_path : {"linear", "constant"} or None, default "linear"
        The deterministic path of :func:`check_deterministic_trend` (None skips it).
    strict : bool, default False
        Raise ``AssertionError`` when a check fails (same as ``.raise_if_failed()``).
    checks : iterable of callables, optional
        Run only these (default all of :func:`model_checks`).

    Returns
    -------
    CheckReport
        ``print(report)`` lists each check; ``report.ok`` is True when none failed.

    Raises
    ------
    AssertionError
        With ``strict=True``, listing every failed check with its message.
    """
    case_id = None
    if isinstance(model, CheckCase):
        if info is not None or targets is not None:
            raise TypeError("check_model: pass either a CheckCase or info/targets, not both")
        case_id, exact_path = model.id, model.exact_path
        model, info, targets = model.model, model.info, model.targets
    info, targets = default_case(info, targets)
    results = []
    for check in (_CHECKS if checks is None else tuple(checks)):
        fn = functools.partial(check, exact_path=exact_path) \
            if check is check_deterministic_trend else check
        doc = (check.__doc__ or "").strip().splitlines()[0] if check.__doc__ else ""
        t0 = time.perf_counter()
        try:
            fn(model, info, targets)
        except SkipCheck as exc:
            results.append(CheckResult(check.__name__, "skipped", str(exc), doc,
                                       time.perf_counter() - t0))
        except Exception as exc:  # report every failure, not just the first
            msg = str(exc).strip().replace("\n", " ")
            results.append(CheckResult(check.__name__, "failed", f"{type(exc).__name__}: {msg}",
                                       doc, time.perf_counter() - t0))
        else:
            results.append(CheckResult(check.__name__, "passed", "", doc, time.perf_counter() - t0))
    report = CheckReport(model_label(model), case_id, tuple(results))
    return report.raise_if_failed() if strict else report


def registered_cases(extra: Iterable[str | type] = ()) -> list[tuple[str, CheckCase]]:
    """``(test id, CheckCase)`` for every case of every registered model, plus ``extra`` classes.

    The model contract test parametrizes over this (like scikit-learn's
    ``parametrize_with_checks``), so a newly registered model is checked without editing the
    test. ``extra`` names further classes (``package.module:Class`` paths or classes), e.g. the
    models of :mod:`harness.contrib`.
    """
    from harness.models.base import available_models, get_model_class

    out = []
    for ref in [*available_models(), *extra]:
        cls = get_model_class(ref)
        label = ref if isinstance(ref, str) else f"{cls.__module__}:{cls.__qualname__}"
        for case in check_cases_of(cls):
            out.append((label if case.id == label else f"{label}[{case.id}]", case))
    return out
