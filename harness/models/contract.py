"""The forecast-output contract, checked in one place, and the check cases a model class declares.

:func:`validate_forecast` is the single definition of a valid forecast: the runner calls it on
every task's output, :func:`harness.models.base.output_array` on every built-in's, and
:func:`harness.testing.check_model` in its output check. :class:`CheckCase` is how a model class
tells the conformance suite which configurations (and, if it needs one, which information set)
to check; see :meth:`harness.models.base.BaseModel.check_cases`.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from harness.errors import TaskOutputError

if TYPE_CHECKING:  # pragma: no cover - typing only
    import xarray as xr

    from vintages import InfoSet, Targets

__all__ = ["EXACT_PATHS", "DIMS", "CheckCase", "ExactPath", "check_cases_of", "default_cases",
           "model_label",
           "validate_forecast"]

DIMS: tuple[str, str, str] = ("draw", "variable", "horizon")
ExactPath = Literal["constant", "linear"]
#: deterministic paths of the trend law (see :class:`CheckCase`)
EXACT_PATHS: tuple[str, ...] = ("constant", "linear")
# information-set layouts the default check case covers (the quarterly panel)
_PANEL_LAYOUTS = (None, "panel", "quarterly")


def model_label(model: Any) -> str:
    """The name a message uses for ``model``: a string as given, else its ``name`` or class name."""
    if isinstance(model, str):
        return model
    if model is None:
        return "?"
    name = getattr(model, "name", None)
    return name if isinstance(name, str) and name else type(model).__name__


def validate_forecast(draws: Any, targets: Targets, n_draws: int, *, model: Any = None
                      ) -> xr.DataArray:
    """Check a model's forecast against the output contract; return it in canonical form.

    The contract: an :class:`xarray.DataArray` with exactly the dims ``draw``, ``variable`` and
    ``horizon`` (any order), ``n_draws`` draws, a ``variable`` coordinate equal to
    ``targets.variables`` and a ``horizon`` coordinate equal to ``targets.horizons`` (same order),
    dtype float64, and every value finite.

    Parameters
    ----------
    draws : object
        What ``forecast()`` returned.
    targets : vintages.Targets
        The targets the model was asked for.
    n_draws : int
        The number of draws asked for.
    model : str or model, optional
        The model, or its name, for the message.

    Returns
    -------
    xarray.DataArray
        ``draws`` transposed to ``(draw, variable, horizon)`` (no copy when already in order).

    Raises
    ------
    TaskOutputError
        One line naming the model, what was expected and what was got, e.g.
        ``model 'ar': forecast() returned 63 draws, expected 64``.
    """
    import xarray as xr

    label = model_label(model)

    def fail(what: str) -> TaskOutputError:
        return TaskOutputError(f"model {label!r}: forecast() returned {what}")

    if not isinstance(draws, xr.DataArray):
        raise fail(f"{type(draws).__name__}, expected an xarray.DataArray with dims {DIMS}")
    if set(draws.dims) != set(DIMS) or draws.ndim != 3:
        raise fail(f"dims {tuple(draws.dims)}, expected {DIMS}")
    if tuple(draws.dims) != DIMS:
        draws = draws.transpose(*DIMS)
    if draws.sizes["draw"] != n_draws:
        raise fail(f"{draws.sizes['draw']} draws, expected {n_draws}")
    got_v = [str(v) for v in draws["variable"].values]
    if got_v != [str(v) for v in targets.variables]:
        raise fail(f"variables {got_v}, expected {list(targets.variables)}")
    hz = draws["horizon"].values
    if hz.dtype.kind not in "iu" or [int(h) for h in hz] != [int(h) for h in targets.horizons]:
        raise fail(f"horizons {hz.tolist()}, expected {[int(h) for h in targets.horizons]}")
    if draws.dtype != np.float64:
        raise fail(f"dtype {draws.dtype}, expected float64")
    vals = draws.values
    finite = np.isfinite(vals)
    if not finite.all():
        bad = int((~finite).sum())
        _, j, k = np.argwhere(~finite)[0]
        raise fail(f"{bad} NaN or infinite draw(s), the first for {got_v[j]!r} at horizon "
                   f"{int(hz[k])}; expected finite values (raise InsufficientDataError instead)")
    return draws


# ---------------------------------------------------------------------------- check cases
@dataclass(frozen=True)
class CheckCase:
    """One configuration of a model class for the conformance suite (:func:`harness.testing.check_model`).

    A model class may declare its cases with a class method ``check_cases() -> list[CheckCase]``
    (:meth:`harness.models.base.BaseModel.check_cases` gives one default case). The model
    contract test runs every case of every registered model, so a new model is checked without
    editing the test. Declare cases to check several configurations, to give a model that needs
    a special information set (for example ``infoset_layout = "native"``: monthly indicators on
    their own axis) one that it accepts, or to say which deterministic path it forecasts exactly.

    Attributes
    ----------
    id : str
        Short label, unique within the class (shown in test ids and reports).
    model : ForecastModel
        The configured, unfitted instance.
    info : InfoSet, optional
        The information set to check on; default :func:`harness.testing.default_case`'s
        simulated 3-variable quarterly panel with a ragged last row.
    targets : Targets, optional
        Default: the first two variables at horizons ``(-1, 0, 1, 4)``. Some target must be
        already observed (the observed-target law needs one).
    exact_path : {"linear", "constant"} or None, default "linear"
        The noise-free deterministic path the model must continue exactly (the trend law):
        ``"linear"`` a different straight line per variable, ``"constant"`` a different level per
        variable (for models that by design forecast no change, e.g. a random walk without
        drift; it checks the level, not the horizon). None skips the law; give ``reason``.
    reason : str
        Why the trend law does not apply (required when ``exact_path`` is None).
    """

    id: str
    model: Any
    info: InfoSet | None = None
    targets: Targets | None = None
    exact_path: ExactPath | None = "linear"
    reason: str = ""

    def __post_init__(self) -> None:
        if self.exact_path is not None and self.exact_path not in EXACT_PATHS:
            raise ValueError(f"check case {self.id!r}: exact_path must be one of "
                             f"{sorted(EXACT_PATHS)} or None, got {self.exact_path!r}")
        if self.exact_path is None and not self.reason:
            raise ValueError(f"check case {self.id!r}: exact_path=None needs a reason saying why "
                             f"the trend law does not apply")


def default_cases(cls: type) -> list[CheckCase]:
    """One case: the class's default instance on the default information set.

    Raises
    ------
    TypeError
        If the class declares an ``infoset_layout`` other than the quarterly panel (e.g.
        ``"native"``): the default panel would not exercise it, so it must declare its own
        ``check_cases`` with an information set it accepts.
    """
    label = getattr(cls, "name", None) or cls.__name__
    layout = getattr(cls, "infoset_layout", None)
    if layout not in _PANEL_LAYOUTS:
        raise TypeError(f"model {label!r} declares infoset_layout={layout!r} but no check_cases(); "
                        f"declare a class method returning CheckCase objects with an "
                        f"information set it accepts")
    return [CheckCase(str(label), cls())]


def check_cases_of(cls: type) -> list[CheckCase]:
    """The check cases of a model class: its ``check_cases()``, else :func:`default_cases`.

    Raises
    ------
    TypeError
        If ``check_cases`` returns something other than a non-empty list of :class:`CheckCase`
        with unique ids, or a class with a special ``infoset_layout`` declares none.
    """
    label = getattr(cls, "name", None) or cls.__name__
    declared = getattr(cls, "check_cases", None)
    cases = declared() if callable(declared) else default_cases(cls)
    if isinstance(cases, CheckCase) or not isinstance(cases, Iterable):
        raise TypeError(f"model {label!r}: check_cases() must return a list of CheckCase, "
                        f"got {type(cases).__name__}")
    cases = list(cases)
    if not cases or not all(isinstance(c, CheckCase) for c in cases):
        raise TypeError(f"model {label!r}: check_cases() must return a non-empty list of "
                        f"CheckCase, got {[type(c).__name__ for c in cases]}")
    ids = [c.id for c in cases]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise TypeError(f"model {label!r}: check_cases() ids must be unique, got duplicates {dup}")
    return cases
