"""Conformance checks for forecasting models, and small builders of synthetic information sets.

:func:`check_model` runs every ``check_*`` function of this module against one model (in the
spirit of scikit-learn's ``check_estimator``) and raises one ``AssertionError`` naming each check
that failed and why. :func:`model_checks` yields the checks one by one, e.g. for
``pytest.mark.parametrize``. The laws checked:

* the draws have dims ``(draw, variable, horizon)``, the declared coordinates, float64, no NaN;
* the same seed gives identical draws, whatever the global NumPy random state; another seed
  gives different draws;
* the model pickles, before and after a forecast, and the copy forecasts identically;
* ``type(model)(**model.params())`` forecasts identically, and ``params()`` is JSON-able;
* the model reads only the information set: a copy of the panel stripped of attributes and
  extra coordinates gives identical draws, trailing all-NaN periods change nothing (or raise a
  ``ValueError``), and the information set is not modified;
* targets already observed are returned as their observed value in every draw;
* a one-period information set raises :class:`harness.models.InsufficientDataError`.
"""

from __future__ import annotations

import json
import pickle
from collections.abc import Callable, Iterator
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from harness.models.errors import InsufficientDataError
from vintages import InfoSet, Targets

__all__ = [
    "check_model",
    "make_infoset",
    "make_targets",
    "model_checks",
    "simulated_panel",
]

_DRAWS = 64


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


def _default_case(info: InfoSet | None, targets: Targets | None) -> tuple[InfoSet, Targets]:
    if info is None:
        info = make_infoset(simulated_panel(), ["output", "prices", "jobs"])
    if targets is None:
        # horizon -1 is the last panel row: observed for "output", unobserved for the rest
        targets = make_targets(info, info.variables[:2], (-1, 0, 1, 4))
    return info, targets


def _run(model, info: InfoSet, targets: Targets, seed: int = 1, n_draws: int = _DRAWS) -> xr.DataArray:
    return model.forecast(info, targets, n_draws, np.random.default_rng(seed))


# ---------------------------------------------------------------------------- checks
def check_output_contract(model, info: InfoSet, targets: Targets) -> None:
    """Draws have dims (draw, variable, horizon), the target coordinates, float64 and no NaN."""
    out = _run(model, info, targets)
    assert isinstance(out, xr.DataArray), f"forecast returned {type(out).__name__}, expected DataArray"
    assert out.dims == ("draw", "variable", "horizon"), f"dims {out.dims}"
    assert out.shape == (_DRAWS, len(targets.variables), len(targets.horizons)), f"shape {out.shape}"
    assert list(out["variable"].values) == list(targets.variables), "variable coordinate"
    assert [int(h) for h in out["horizon"].values] == list(targets.horizons), "horizon coordinate"
    assert out.dtype == np.float64, f"dtype {out.dtype}"
    assert np.isfinite(out.values).all(), "non-finite draws"


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
    bare = xr.DataArray(info.values().copy(), dims=("period", "variable"),
                        coords={"period": info.periods.copy(), "variable": list(info.variables)})
    stripped = replace(info, panel=bare, partial=None,
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
    current = max(info.current, periods[-1])
    padded = replace(info, panel=panel, current=current)
    shift = current.ordinal - info.current.ordinal
    moved = replace(targets, current=current,
                    horizons=tuple(int(h) - shift for h in targets.horizons))
    try:
        out = _run(model, padded, moved).values
    except ValueError:
        return
    np.testing.assert_array_equal(out, ref)


def check_observed_targets(model, info: InfoSet, targets: Targets) -> None:
    """Targets already observed are returned as their observed value in every draw."""
    vals = info.values()
    first = info.periods[0]
    out = _run(model, info, targets)
    found = 0
    shifts = getattr(info, "shifts", None) or {}
    for j, v in enumerate(targets.variables):
        col = info.variables.index(v)
        for k, h in enumerate(targets.horizons):
            # a realigned panel holds reference period p in the row labelled p + shift
            row = (targets.current + int(h)).ordinal + int(shifts.get(v, 0)) - first.ordinal
            if 0 <= row < len(vals) and np.isfinite(vals[row, col]):
                found += 1
                got = out.values[:, j, k]
                assert np.all(got == vals[row, col]), f"{v} at h={h}: observed value not reproduced"
    assert found, "the check needs targets with an observed period"


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
    check_insufficient_data,
)


def model_checks() -> Iterator[Callable[..., None]]:
    """The check functions, each called as ``check(model, info, targets)``."""
    yield from _CHECKS


def check_model(model, info: InfoSet | None = None, targets: Targets | None = None) -> None:
    """Run every conformance check against ``model``.

    Parameters
    ----------
    model : ForecastModel
        The model (unfitted; it is forecast several times).
    info : InfoSet, optional
        The information set to use; default a simulated 3-variable, 80-quarter panel with a
        ragged last row.
    targets : Targets, optional
        Default: the first two variables at horizons ``(-1, 0, 1, 4)``.

    Raises
    ------
    AssertionError
        Listing every failed check with its message.
    """
    info, targets = _default_case(info, targets)
    failures = []
    for check in _CHECKS:
        try:
            check(model, info, targets)
        except Exception as exc:  # report every failure, not just the first
            failures.append(f"{check.__name__}: {type(exc).__name__}: {exc}")
    if failures:
        raise AssertionError(f"model {getattr(model, 'name', model)!r} failed "
                             f"{len(failures)} check(s):\n  " + "\n  ".join(failures))
