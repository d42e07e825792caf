"""The model protocol, the registry of model classes, and the building blocks of a model.

A model is any object with a ``name``, a ``version``, ``params()`` and
``forecast(info, targets, n_draws, rng) -> xarray.DataArray`` (dims ``draw, variable, horizon``).
:class:`ForecastModel` states this as a :class:`typing.Protocol`; :class:`BaseModel` is an optional
base class that derives ``params()`` from the constructor's signature and runs the forecast
template the built-in models share. ``docs/model_template.py`` is a complete, checked example.

Laws every model obeys (checked by :func:`harness.testing.check_model`):

* the draws depend only on the information set and on the generator passed in;
* a target already published in the information set is returned as its published value in
  every draw; a *partial* quarter (``InfoSet.partial``: a monthly indicator's quarter known for
  only one or two of its months) is not a published value: it is left out (see below);
* ``type(model)(**model.params())`` forecasts exactly like ``model``;
* the forecast satisfies the output contract (:func:`harness.models.contract.validate_forecast`).

Building blocks for your own model
----------------------------------
:class:`TargetLayout`
    ``TargetLayout.build(name, info, targets, n_draws, rng)`` validates a forecast call and
    locates every target: the panel as an array (``values``, partial quarters left out), which
    targets are already published (``observed``, ``observed_values``), the steps of each target
    after an anchor (:meth:`TargetLayout.steps`) or after each variable's own last observation
    (:meth:`TargetLayout.own_runs`).
:func:`output_array`
    Wraps ``(draw, variable, horizon)`` draws as the DataArray the runner expects, filling the
    published targets with their value and validating the result.
:func:`trailing_run`, :func:`lag_design`, :func:`per_variable`, :func:`ar1_scales`
    Small sample helpers (the last contiguous stretch of observations, a VAR design matrix, a
    scalar-or-per-variable hyperparameter, AR(1) residual scales).

A :class:`BaseModel` subclass implements only ``draw(layout, rng)``; :meth:`BaseModel.forecast`
does ``validate() -> TargetLayout.build -> draw -> output_array``.

Partial quarters are left out
-----------------------------
When a monthly indicator enters a quarterly panel with ``partial="keep"``, its current quarter
may rest on one or two months; ``InfoSet.partial`` flags such cells. :class:`TargetLayout`
treats a flagged cell as *unobserved*: it is NaN in ``layout.values`` (so no model estimates on
it or conditions a ragged edge on it), it is not a published target (so the quarter is
forecast, not returned as a point mass at the partial mean), and ``layout.left_out`` records
where it was. :func:`harness.testing.check_model` checks this as a law (flagging a cell
partial gives the draws of deleting it). A model that wants the months already known should
use them where they are what they are, single months: the native-frequency information set
(monthly indicators on their own axis, ``infoset_layout = "native"``), not a quarterly mean of
fewer months.
"""

from __future__ import annotations

import importlib
import inspect
from dataclasses import dataclass
from typing import Any, ClassVar, Literal, Protocol, runtime_checkable

import numpy as np
import xarray as xr

from harness.errors import TaskOutputError
from harness.models.contract import (
    DIMS,
    CheckCase,
    default_cases,
    model_label,
    validate_forecast,
)
from harness.models.errors import (
    InsufficientDataError,
    ModelError,
    ModelParameterError,
    UnknownModelError,
)
from vintages import InfoSet, Targets

__all__ = [
    "BaseModel",
    "CheckCase",
    "Density",
    "ForecastModel",
    "InsufficientDataError",
    "LAYOUT_VERSION",
    "ModelError",
    "ModelParameterError",
    "MeanKind",
    "ShockKind",
    "TargetLayout",
    "UnknownModelError",
    "ar1_scales",
    "available_models",
    "get_model_class",
    "lag_design",
    "make_model",
    "output_array",
    "partial_mask",
    "per_variable",
    "register",
    "trailing_run",
]

#: version of the shared forecast template's semantics (:class:`TargetLayout`,
#: :func:`output_array`); bump it when they change what a model sees or returns, so caches keyed
#: on model code can include it. "2": partial quarters are left out.
LAYOUT_VERSION = "2"

Density = Literal["gaussian", "empirical"]
MeanKind = Literal["zero", "sample"]
ShockKind = Literal["gaussian", "student"]


@runtime_checkable
class ForecastModel(Protocol):
    """What the runner needs from a model (duck typing; no base class required)."""

    name: str
    version: str

    def forecast(self, info: InfoSet, targets: Targets, n_draws: int,
                 rng: np.random.Generator) -> xr.DataArray:
        """Predictive draws, dims ``(draw, variable, horizon)``, using only ``info`` and ``rng``."""
        ...

    def params(self) -> dict[str, Any]:
        """JSON-able hyperparameters such that ``type(self)(**self.params())`` is equivalent."""
        ...


# ---------------------------------------------------------------------------- registry
_REGISTRY: dict[str, type] = {}


def register(cls: type) -> type:
    """Class decorator: make a model class available under its ``name``.

    Parameters
    ----------
    cls : type
        A class with a non-empty ``name: str``, a ``version: str`` and a ``forecast`` method.

    Returns
    -------
    type
        ``cls`` unchanged.

    Raises
    ------
    TypeError
        If ``cls`` lacks a string ``name``/``version`` or a ``forecast`` method.
    ValueError
        If another class is already registered under the same name.
    """
    name = getattr(cls, "name", None)
    if not isinstance(name, str) or not name:
        raise TypeError(f"cannot register {cls!r}: expected a non-empty class attribute 'name: str', "
                        f"got {name!r}")
    if not isinstance(getattr(cls, "version", None), str):
        raise TypeError(f"cannot register model {name!r}: expected a class attribute 'version: str', "
                        f"got {getattr(cls, 'version', None)!r}")
    if not callable(getattr(cls, "forecast", None)):
        raise TypeError(f"cannot register model {name!r}: the class has no 'forecast' method")
    old = _REGISTRY.get(name)
    # re-registering the same class (a module reload) is harmless; a different class is a clash
    if old is not None and (old.__module__, old.__qualname__) != (cls.__module__, cls.__qualname__):
        raise ValueError(f"model name {name!r} is already registered to "
                         f"{old.__module__}:{old.__qualname__}; cannot register "
                         f"{cls.__module__}:{cls.__qualname__}")
    _REGISTRY[name] = cls
    return cls


def _load_builtins() -> None:
    # the package's __init__ imports every built-in model module, which registers them
    importlib.import_module("harness.models")


def available_models() -> list[str]:
    """Registered model names, sorted."""
    _load_builtins()
    return sorted(_REGISTRY)


def get_model_class(name_or_path: str | type) -> type:
    """Resolve a registered name or a ``package.module:Class`` path to a model class.

    Parameters
    ----------
    name_or_path : str or type
        A registered name (see :func:`available_models`), a path ``package.module:Class``
        (``Class`` may be dotted for nested classes), or a model class (returned unchanged).

    Returns
    -------
    type
        The model class.

    Raises
    ------
    UnknownModelError
        If the name is not registered, the module cannot be imported, or the attribute is
        missing or is not a model class (no ``forecast`` method).
    """
    if isinstance(name_or_path, type):
        cls = name_or_path
    elif not isinstance(name_or_path, str):
        raise UnknownModelError(f"model type must be a registered name or 'package.module:Class', "
                                f"got {type(name_or_path).__name__} {name_or_path!r}")
    elif ":" in name_or_path:
        cls = _import_path(name_or_path, what="model class")
    else:
        _load_builtins()
        try:
            cls = _REGISTRY[name_or_path]
        except KeyError:
            raise UnknownModelError(
                f"unknown model {name_or_path!r}; expected one of {sorted(_REGISTRY)} "
                f"or a path 'package.module:Class'") from None
    if not isinstance(cls, type) or not callable(getattr(cls, "forecast", None)):
        raise UnknownModelError(f"{name_or_path!r} resolves to {cls!r}, which is not a model class "
                                f"(expected a class with a 'forecast' method)")
    return cls


def _import_path(path: str, *, what: str) -> Any:
    """Import ``package.module:Attr.sub`` or ``path/to/file.py:Attr``; errors name the part that failed."""
    from harness.models.introspect import load_object

    try:
        return load_object(path, what=what)
    except ImportError as exc:
        raise UnknownModelError(str(exc)) from None


def make_model(type_name: str | type, **params: Any) -> Any:
    """Instantiate a model by registered name or path, checking the parameter names first.

    Parameters
    ----------
    type_name : str or type
        As for :func:`get_model_class`.
    **params
        Hyperparameters passed to the constructor.

    Returns
    -------
    ForecastModel
        The (unfitted) model.

    Raises
    ------
    UnknownModelError
        If ``type_name`` does not resolve.
    ModelParameterError
        If a parameter name is not accepted by the constructor (valid names are listed sorted).
    """
    cls = get_model_class(type_name)
    sig = inspect.signature(cls.__init__)
    takes_any = any(p.kind is p.VAR_KEYWORD for p in sig.parameters.values())
    valid = sorted(p.name for p in sig.parameters.values()
                   if p.name != "self" and p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY))
    unknown = sorted(set(params) - set(valid))
    if unknown and not takes_any:
        raise ModelParameterError(f"model {getattr(cls, 'name', cls.__name__)!r}: unknown parameter(s) "
                                  f"{unknown}; valid parameters: {valid}")
    return cls(**params)


# ---------------------------------------------------------------------------- base class
class BaseModel:
    """Optional base class: declared parameters, ``params()``, one validated forecast template.

    Subclasses store every constructor argument unchanged under the same attribute name, do no
    work in ``__init__`` (learned state ends in ``_``), declare the values each parameter
    accepts in :attr:`param_constraints` (see :mod:`harness.models.params`; cross-parameter
    rules go in :meth:`check_params`), and implement :meth:`draw`. :meth:`forecast` is the
    template shared by the built-ins: validate the parameters, locate every target
    (:class:`TargetLayout`), call :meth:`draw`, and return :func:`output_array` of the result
    (already-published targets filled in with their published value).
    """

    name: ClassVar[str] = ""
    version: ClassVar[str] = "0"
    #: parameter name -> list of accepted alternatives (``None`` = the value None)
    param_constraints: ClassVar[dict[str, list]] = {}

    @classmethod
    def _param_names(cls) -> list[str]:
        sig = inspect.signature(cls.__init__)
        return [p.name for p in sig.parameters.values()
                if p.name != "self" and p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)]

    @classmethod
    def check_params(cls, params: dict[str, Any], model: str) -> None:
        """Rules that involve several parameters; raise :class:`ModelParameterError`."""

    @classmethod
    def check_cases(cls) -> list[CheckCase]:
        """The configurations the conformance suite checks (default: the default instance).

        Override to check several configurations, to supply an information set the model
        needs (a class with ``infoset_layout = "native"`` must), or to state which
        deterministic path the model continues exactly (``CheckCase.exact_path``)::

            @classmethod
            def check_cases(cls):
                return [CheckCase("drift", cls(mean="sample")),
                        CheckCase("no_drift", cls(), exact_path="constant")]

        ``tests/harness/models/test_models_contract.py`` runs every case of every registered
        model through :func:`harness.testing.check_model`.
        """
        return default_cases(cls)

    def params(self) -> dict[str, Any]:
        """The constructor arguments, as stored (JSON-able for the built-in models)."""
        return {k: getattr(self, k) for k in self._param_names()}

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.params().items())
        return f"{type(self).__name__}({args})"

    def validate(self) -> dict[str, Any]:
        """Check every parameter against :attr:`param_constraints`; return them coerced."""
        from harness.models.params import validate_params

        return validate_params(type(self), self.params(), model=self.name)

    def forecast(self, info: InfoSet, targets: Targets, n_draws: int,
                 rng: np.random.Generator) -> xr.DataArray:
        """Predictive draws, dims ``(draw, variable, horizon)``; see :meth:`draw`."""
        self.validate()
        lay = TargetLayout.build(self.name, info, targets, n_draws, rng)
        return output_array(self.draw(lay, rng), lay, self)

    def draw(self, layout: TargetLayout, rng: np.random.Generator) -> np.ndarray:
        """Draws ``(n_draws, n_target_variables, n_horizons)`` for the targets in ``layout``.

        Cells of targets already published (``layout.observed``) may hold anything: the
        template overwrites them with the published value.
        """
        raise NotImplementedError(f"{type(self).__name__}.draw is not implemented")

    # -- helpers for subclasses -------------------------------------------------
    def insufficient_data(self, message: str) -> InsufficientDataError:
        """The error to raise when the information set cannot support the estimate (say what was
        needed and what was found): ``raise self.insufficient_data("needs 8 quarters of gdp, got 5")``.
        The runner records it as the task's failure and carries on."""
        return InsufficientDataError(f"model {self.name!r}: {message}")

    _fail = insufficient_data  # the name the built-in models use

    def _bad_param(self, param: str, expected: str, got: Any) -> ModelParameterError:
        return ModelParameterError(f"model {self.name!r}: parameter {param!r} must be {expected}, "
                                   f"got {got!r}")


def per_variable(model: BaseModel, param: str, value: Any, variables: list[str]) -> np.ndarray:
    """A scalar or ``{variable: value}`` hyperparameter as one float per variable (extras ignored)."""
    if isinstance(value, dict):
        missing = sorted(set(variables) - set(value))
        if missing:
            raise model._bad_param(param, f"a number or a mapping covering every variable "
                                          f"(missing {missing})", value)
        out = np.array([float(value[v]) for v in variables])
    else:
        try:
            out = np.full(len(variables), float(value))
        except (TypeError, ValueError):
            raise model._bad_param(param, "a number or a mapping {variable: number}", value) from None
    if not np.isfinite(out).all():
        raise model._bad_param(param, "finite", value)
    return out


# ---------------------------------------------------------------------------- targets and output
@dataclass(frozen=True)
class TargetLayout:
    """Where each target sits in the information set, validated once per forecast call.

    Attributes
    ----------
    values : ndarray (T, n)
        The panel, rows oldest first, NaN where unobserved.
    ordinals : ndarray (T,)
        Period ordinals of the panel rows (consecutive).
    columns : ndarray (n_target_vars,)
        Column of each target variable in ``values``.
    target_ordinals : ndarray (n_target_vars, n_horizons)
        Panel row label (period ordinal) holding each target: the target period itself, plus
        the variable's vertical-realignment shift when the panel was realigned
        (``info.shifts``; the row of period ``p`` holds reference period ``p - shift``).
    observed : ndarray (n_target_vars, n_horizons) bool
        True where the target period already has a value in the panel.
    observed_values : ndarray (n_target_vars, n_horizons)
        Those values (NaN elsewhere).
    n_draws : int
    model : str
        The model's name, for messages.
    left_out : ndarray (T, n) bool
        Cells the panel has a value for that the layout treats as unobserved: partial quarters
        (``info.partial``). They are NaN in ``values`` and never ``observed``.

    Examples
    --------
    Inside a model's ``draw`` (or its own ``forecast``)::

        lay = TargetLayout.build(self.name, info, targets, n_draws, rng)
        runs, steps = lay.own_runs()   # per target variable: its last stretch, steps to forecast
        ...                            # fill draws[:, j, k] where steps[j, k] > 0
        return output_array(draws, lay, self)
    """

    variables: list[str]
    values: np.ndarray
    ordinals: np.ndarray
    periods: Any  # pandas.PeriodIndex of the panel rows
    targets: Targets
    columns: np.ndarray
    target_ordinals: np.ndarray
    observed: np.ndarray
    observed_values: np.ndarray
    n_draws: int
    model: str
    left_out: np.ndarray

    @classmethod
    def build(cls, model: str, info: InfoSet, targets: Targets, n_draws: int,
              rng: np.random.Generator) -> TargetLayout:
        """Validate the call and locate every target; errors say what was expected and got.

        Cells flagged in ``info.partial`` are left out: NaN in ``values``, never ``observed``,
        recorded in ``left_out``.
        """
        if not isinstance(rng, np.random.Generator):
            raise TypeError(f"model {model!r}: rng must be a numpy.random.Generator, "
                            f"got {type(rng).__name__}")
        if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
            raise ValueError(f"model {model!r}: n_draws must be an integer >= 1, got {n_draws!r}")
        if targets.freq != info.freq:
            raise ValueError(f"model {model!r}: targets are in frequency {targets.freq!r} but the "
                             f"information set is in {info.freq!r}")
        variables = info.variables
        missing = sorted(set(targets.variables) - set(variables))
        if missing:
            raise ValueError(f"model {model!r}: target variable(s) {missing} are not in the "
                             f"information set; available: {sorted(variables)}")
        if len(targets.horizons) == 0 or len(targets.variables) == 0:
            raise ValueError(f"model {model!r}: targets need at least one variable and one horizon, "
                             f"got variables={targets.variables!r}, horizons={targets.horizons!r}")
        values = info.values()
        ordinals = np.asarray(info.periods.asi8, dtype=np.int64)
        if len(ordinals) == 0:
            raise InsufficientDataError(f"model {model!r}: the information set's panel is empty")
        if len(ordinals) > 1 and not np.all(np.diff(ordinals) == 1):
            raise ValueError(f"model {model!r}: the panel's periods must be consecutive, got "
                             f"{list(info.periods.astype(str))[:5]}...")
        left_out = partial_mask(info) & np.isfinite(values)
        if left_out.any():
            # a copy: the information set itself is never modified
            values = np.where(left_out, np.nan, values)
        columns = np.array([variables.index(v) for v in targets.variables], dtype=np.int64)
        shifts = getattr(info, "shifts", None) or {}
        shift = np.array([int(shifts.get(v, 0)) for v in targets.variables], dtype=np.int64)
        tord = np.array([(targets.current + int(h)).ordinal for h in targets.horizons], dtype=np.int64)
        tord = tord[None, :] + shift[:, None]
        rows = tord - ordinals[0]
        inside = (rows >= 0) & (rows < len(ordinals))
        obs_vals = np.full(tord.shape, np.nan)
        jj, kk = np.nonzero(inside)
        obs_vals[jj, kk] = values[rows[jj, kk], columns[jj]]
        observed = np.isfinite(obs_vals)
        return cls(variables=variables, values=values, ordinals=ordinals, periods=info.periods,
                   targets=targets, columns=columns, target_ordinals=tord, observed=observed,
                   observed_values=obs_vals, n_draws=int(n_draws), model=model,
                   left_out=left_out)

    def own_runs(self) -> tuple[list[tuple[int, int]], np.ndarray]:
        """Per target variable, its trailing run of observations and the steps of each target.

        The run is ``(start, stop)`` of the contiguous stretch of the variable's own observations
        ending at its last one (:func:`trailing_run`); steps are counted from that last
        observation (:meth:`steps`), so each univariate model handles the ragged edge per
        variable the same way.
        """
        runs = [trailing_run(self.values[:, col]) for col in self.columns]
        anchors = np.array([self.ordinals[max(stop, 1) - 1] for _, stop in runs], dtype=np.int64)
        return runs, self.steps(anchors)

    def steps(self, anchor: np.ndarray | int) -> np.ndarray:
        """Steps after ``anchor`` (period ordinal, scalar or per target variable) of each unobserved target.

        Observed targets get 0. An unobserved target at or before its anchor (a gap inside the
        sample, or a period before the panel starts) cannot be forecast and raises ``ValueError``.
        """
        anchor = np.broadcast_to(np.asarray(anchor, dtype=np.int64), (len(self.columns),))
        s = self.target_ordinals - anchor[:, None]
        bad = (~self.observed) & (s <= 0)
        if bad.any():
            j, k = np.argwhere(bad)[0]
            period = self.targets.current + int(self.targets.horizons[k])
            raise ValueError(f"model {self.model!r}: target {self.targets.variables[j]!r} at "
                             f"{period} (horizon {self.targets.horizons[k]}) lies inside or before "
                             f"the estimation sample but has no value in the information set")
        return np.where(self.observed, 0, s)


def partial_mask(info: InfoSet) -> np.ndarray:
    """``(T, n)`` bool: the cells ``info.partial`` flags, aligned on the panel (False without flags)."""
    shape = (len(info.periods), len(info.variables))
    part = getattr(info, "partial", None)
    if part is None:
        return np.zeros(shape, dtype=bool)
    part = part.transpose("period", "variable")
    same = (part.shape == shape and list(map(str, part["variable"].values)) == info.variables
            and part.indexes["period"].equals(info.periods))
    if not same:
        part = part.reindex(period=info.periods, variable=info.variables, fill_value=False)
    return np.asarray(part.values, dtype=bool)


def output_array(draws: np.ndarray, layout: TargetLayout, model: Any) -> xr.DataArray:
    """The forecast DataArray: published targets filled in, the output contract checked.

    Parameters
    ----------
    draws : ndarray (n_draws, n_target_variables, n_horizons)
        The model's draws in the order of ``layout.targets``; cells of published targets
        (``layout.observed``) may hold anything (they are overwritten with the published value).
    layout : TargetLayout
    model : ForecastModel
        Its ``name`` and ``version`` go to the array's attributes and to error messages.

    Returns
    -------
    xarray.DataArray
        Dims ``(draw, variable, horizon)``, coordinates from ``layout.targets``, float64.

    Raises
    ------
    TaskOutputError
        If the shape is wrong or a draw is not finite (a model must raise
        :class:`InsufficientDataError` rather than return NaN); see
        :func:`harness.models.contract.validate_forecast`.
    """
    out = np.array(draws, dtype=np.float64, copy=True)
    expected = (layout.n_draws, *layout.observed.shape)
    if out.shape != expected:
        raise TaskOutputError(f"model {model_label(model)!r}: draws have shape {out.shape}, "
                              f"expected {expected} (draws, target variables, horizons)")
    j, k = np.nonzero(layout.observed)
    out[:, j, k] = layout.observed_values[j, k]
    da = xr.DataArray(
        out, dims=DIMS,
        coords={"draw": np.arange(out.shape[0]), "variable": list(layout.targets.variables),
                "horizon": [int(h) for h in layout.targets.horizons]},
        attrs={"model": str(getattr(model, "name", type(model).__name__)),
               "model_version": str(getattr(model, "version", ""))},
    )
    return validate_forecast(da, layout.targets, layout.n_draws, model=model)


# ---------------------------------------------------------------------------- sample helpers
def trailing_run(x: np.ndarray) -> tuple[int, int]:
    """``(start, stop)`` of the contiguous finite stretch ending at the last finite entry of ``x``.

    ``x`` is 1-D, or 2-D with rows as time (then a row counts only if all its entries are finite).
    Returns ``(0, 0)`` when nothing is finite.
    """
    ok = np.isfinite(x) if x.ndim == 1 else np.isfinite(x).all(axis=1)
    if not ok.any():
        return 0, 0
    stop = int(np.flatnonzero(ok)[-1]) + 1
    gaps = np.flatnonzero(~ok[:stop])
    start = int(gaps[-1]) + 1 if len(gaps) else 0
    return start, stop


def lag_design(y: np.ndarray, p: int) -> tuple[np.ndarray, np.ndarray]:
    """Regressand and regressors of a VAR(p) with intercept.

    Parameters
    ----------
    y : ndarray (T, n)
    p : int

    Returns
    -------
    Y : ndarray (T - p, n)
    X : ndarray (T - p, n * p + 1)
        Columns ``[y_{t-1} (n), ..., y_{t-p} (n), 1]``.
    """
    t, n = y.shape
    cols = [y[p - lag:t - lag] for lag in range(1, p + 1)]
    x = np.concatenate(cols + [np.ones((t - p, 1))], axis=1) if p else np.ones((t, 1))
    return y[p:], x


def ar1_scales(y: np.ndarray) -> np.ndarray:
    """Residual standard deviation of an AR(1) with intercept fitted by OLS to each column.

    The usual scale of Minnesota-type priors (Litterman 1986; Bańbura, Giannone & Reichlin 2010).
    """
    yt, x = y[1:], y[:-1]
    xm, ym = x - x.mean(axis=0), yt - yt.mean(axis=0)
    sxx = (xm * xm).sum(axis=0)
    beta = np.divide((xm * ym).sum(axis=0), sxx, out=np.zeros(y.shape[1]), where=sxx > 0)
    resid = ym - xm * beta
    dof = max(len(yt) - 2, 1)
    s = np.sqrt((resid * resid).sum(axis=0) / dof)
    # a constant series would give a zero scale and a singular prior: fall back to its level
    fallback = np.maximum(np.abs(y).mean(axis=0), 1.0) * 1e-3
    return np.where(s > 1e-12, s, fallback)
