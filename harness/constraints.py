"""Constraints on values, declared as data and checked by one validator: model hyperparameters,
spec keys and test settings all use them.

For models: hyperparameter constraints are declared once on the model class and checked by
:func:`validate_params`.

A model class states, for each constructor argument, the values it accepts::

    class AutoRegression(BaseModel):
        param_constraints = {
            "max_lags": [Interval(int, 0, 24)],
            "ic": [Options("aic", "bic"), None],
            "param_uncertainty": [Boolean()],
        }

Each entry is a list of alternatives; ``None`` in the list means ``None`` is accepted. The same
declaration serves the spec parser (a bad value is refused when the spec is read, naming the
file, model, parameter and allowed values), the model's own check at forecast time, and help
texts (:func:`describe`). TOML has no null, so a spec writes ``"none"`` where ``None`` is
allowed (and ``"none"`` is not itself an option); :func:`coerce_toml` translates it.

The idea follows scikit-learn's ``_parameter_constraints`` (Pedregosa et al. 2011, and the
library's developer guide): constraints as data, one validator.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "Boolean",
    "Date",
    "ListOf",
    "Text",
    "check_value",
    "describe_alternatives",
    "Constraint",
    "HasMethods",
    "Interval",
    "JSONTable",
    "ImportPath",
    "Options",
    "PerVariable",
    "coerce_toml",
    "describe",
    "validate_params",
]

NONE_SPELLING = "none"


class Constraint:
    """One accepted kind of value; subclasses say what and check it."""

    def accepts(self, value: Any) -> bool:  # pragma: no cover - abstract
        raise NotImplementedError

    def describe(self) -> str:  # pragma: no cover - abstract
        raise NotImplementedError

    def coerce(self, value: Any) -> Any:
        """The value as the model stores it (e.g. a TOML integer given for a float)."""
        return value


def _is_int(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) or (
        type(value).__module__ == "numpy" and getattr(value, "dtype", None) is not None
        and value.dtype.kind in "iu")


def _is_real(value: Any) -> bool:
    if isinstance(value, bool):
        return False
    if isinstance(value, (int, float)):
        return True
    return type(value).__module__ == "numpy" and getattr(value, "dtype", None) is not None \
        and value.dtype.kind in "iuf"


@dataclass(frozen=True)
class Interval(Constraint):
    """A number of ``kind`` (int or float) in an interval; ``None`` bounds are open ends.

    ``closed`` says which ends belong: ``"both"``, ``"left"``, ``"right"`` or ``"neither"``.
    Floats must be finite.
    """

    kind: type
    low: float | None = None
    high: float | None = None
    closed: str = "both"

    def accepts(self, value: Any) -> bool:
        if self.kind is int:
            if not _is_int(value):
                return False
        elif not _is_real(value) or not math.isfinite(float(value)):
            return False
        v = float(value)
        lo_ok = self.low is None or (v >= self.low if self.closed in ("both", "left") else v > self.low)
        hi_ok = self.high is None or (v <= self.high if self.closed in ("both", "right") else v < self.high)
        return lo_ok and hi_ok

    def coerce(self, value: Any) -> Any:
        return int(value) if self.kind is int else float(value)

    def describe(self) -> str:
        what = "an integer" if self.kind is int else "a number"
        if self.low is None and self.high is None:
            return what
        lo_br = "[" if self.closed in ("both", "left") else "("
        hi_br = "]" if self.closed in ("both", "right") else ")"
        lo = "-inf" if self.low is None else f"{self.low:g}"
        hi = "inf" if self.high is None else f"{self.high:g}"
        if self.low is not None and self.high is None:
            return f"{what} {'>=' if lo_br == '[' else '>'} {lo}"
        if self.high is not None and self.low is None:
            return f"{what} {'<=' if hi_br == ']' else '<'} {hi}"
        return f"{what} in {lo_br}{lo}, {hi}{hi_br}"


@dataclass(frozen=True)
class Options(Constraint):
    """One of a fixed set of strings."""

    values: tuple[str, ...]

    def __init__(self, *values: str):
        object.__setattr__(self, "values", tuple(values))

    def accepts(self, value: Any) -> bool:
        return isinstance(value, str) and value in self.values

    def describe(self) -> str:
        return f"one of {sorted(self.values)}"


@dataclass(frozen=True)
class Boolean(Constraint):
    """``True`` or ``False``."""

    def accepts(self, value: Any) -> bool:
        return isinstance(value, bool) or type(value).__name__ == "bool_"

    def coerce(self, value: Any) -> Any:
        return bool(value)

    def describe(self) -> str:
        return "true or false"


@dataclass(frozen=True)
class PerVariable(Constraint):
    """A table ``{variable: value}`` whose values all satisfy ``inner`` (keys checked at forecast time)."""

    inner: Constraint

    def accepts(self, value: Any) -> bool:
        return isinstance(value, Mapping) and bool(value) and all(
            isinstance(k, str) and self.inner.accepts(v) for k, v in value.items())

    def coerce(self, value: Any) -> Any:
        return {str(k): self.inner.coerce(v) for k, v in value.items()}

    def describe(self) -> str:
        return f"a table {{variable = value}} of {self.inner.describe()}"


@dataclass(frozen=True)
class ImportPath(Constraint):
    """A string ``package.module:Attribute`` (resolved when used)."""

    def accepts(self, value: Any) -> bool:
        if not isinstance(value, str):
            return False
        mod, sep, attr = value.partition(":")
        return bool(sep and mod and attr and not mod.startswith("."))

    def describe(self) -> str:
        return "an import path 'package.module:Name'"


@dataclass(frozen=True)
class HasMethods(Constraint):
    """An object with the named methods (duck typing, e.g. ``fit`` and ``predict``)."""

    methods: tuple[str, ...]

    def __init__(self, *methods: str):
        object.__setattr__(self, "methods", tuple(methods))

    def accepts(self, value: Any) -> bool:
        return not isinstance(value, (str, bytes)) and all(
            callable(getattr(value, m, None)) for m in self.methods)

    def describe(self) -> str:
        return "an object with methods " + ", ".join(self.methods)


@dataclass(frozen=True)
class JSONTable(Constraint):
    """A table of JSON-able values (passed through unchanged)."""

    def accepts(self, value: Any) -> bool:
        import json

        if not isinstance(value, Mapping):
            return False
        try:
            json.dumps(value)
        except (TypeError, ValueError):
            return False
        return True

    def describe(self) -> str:
        return "a table of plain values"


@dataclass(frozen=True)
class Text(Constraint):
    """A string matching ``pattern`` (a regular expression, anchored), described by ``what``."""

    pattern: str = r".+"
    what: str = "a text"

    def accepts(self, value: Any) -> bool:
        import re

        return isinstance(value, str) and re.fullmatch(self.pattern, value) is not None

    def describe(self) -> str:
        return self.what


@dataclass(frozen=True)
class Date(Constraint):
    """A calendar day: a TOML date or a ``YYYY-MM-DD`` string; stored as the ISO string."""

    def accepts(self, value: Any) -> bool:
        import datetime as dt
        import re

        if isinstance(value, dt.datetime):
            return False
        if isinstance(value, dt.date):
            return True
        if not isinstance(value, str) or not re.fullmatch(r"[0-9]{4}-[0-9]{2}-[0-9]{2}", value):
            return False
        try:
            dt.date.fromisoformat(value)
        except ValueError:
            return False
        return True

    def coerce(self, value: Any) -> Any:
        return value.isoformat() if hasattr(value, "isoformat") else str(value)

    def describe(self) -> str:
        return "a date YYYY-MM-DD"


@dataclass(frozen=True)
class ListOf(Constraint):
    """A list whose items all satisfy ``inner``, with at least ``min_len`` items."""

    inner: Constraint
    min_len: int = 1
    max_len: int | None = None

    def accepts(self, value: Any) -> bool:
        return (isinstance(value, (list, tuple)) and len(value) >= self.min_len
                and (self.max_len is None or len(value) <= self.max_len)
                and all(self.inner.accepts(v) for v in value))

    def coerce(self, value: Any) -> Any:
        return tuple(self.inner.coerce(v) for v in value)

    def describe(self) -> str:
        n = f"{self.min_len}" + ("" if self.max_len is None else f"–{self.max_len}")
        return f"a list of {n}{'+' if self.max_len is None else ''} item(s), each {self.inner.describe()}"


def check_value(alternatives, value: Any, *, toml: bool = False) -> tuple[bool, Any]:
    """Whether ``value`` satisfies one of ``alternatives`` (``None`` = the value None), and its coerced form."""
    if toml and value == NONE_SPELLING and None in alternatives and not any(
            a is not None and a.accepts(value) for a in alternatives):
        value = None
    for alt in alternatives:
        if alt is None:
            if value is None:
                return True, None
        elif alt.accepts(value):
            return True, alt.coerce(value)
    return False, value


def describe_alternatives(alternatives) -> str:
    """The alternatives in words (``"an integer >= 0 or none (written \"none\" in a spec)"``)."""
    words = [a.describe() for a in alternatives if a is not None]
    if any(a is None for a in alternatives):
        words.append(f"none (written \"{NONE_SPELLING}\" in a spec)")
    return " or ".join(words)


def _alternatives(cls: type, name: str) -> Sequence[Constraint | None] | None:
    table = getattr(cls, "param_constraints", None) or {}
    return table.get(name)


def describe(cls: type, name: str) -> str:
    """The allowed values of parameter ``name`` of ``cls`` in words (for messages and help)."""
    alts = _alternatives(cls, name)
    if alts is None:
        return "any value"
    return describe_alternatives(alts)


def coerce_toml(cls: type, name: str, value: Any) -> Any:
    """Translate a TOML value to what the model expects: ``"none"`` to ``None`` where allowed."""
    alts = _alternatives(cls, name)
    if alts is not None and value == NONE_SPELLING and None in alts and not any(
            a is not None and a.accepts(value) for a in alts):
        return None
    return value


def validate_params(cls: type, params: Mapping[str, Any], *, model: str | None = None,
                    toml: bool = False) -> dict[str, Any]:
    """Check parameter values against the class's ``param_constraints``; return them coerced.

    Parameters
    ----------
    cls : type
        The model class.
    params : mapping
        Parameter name to value (names not declared are checked by the caller against the
        constructor's signature; here they pass unchanged).
    model : str, optional
        The label used in messages (default the class's ``name``).
    toml : bool
        Values come from a TOML spec: apply :func:`coerce_toml` first.

    Returns
    -------
    dict
        The values, each coerced by the first alternative that accepts it.

    Raises
    ------
    ModelParameterError
        ``model 'ar': parameter 'ic' must be one of 'aic', 'bic' or none ..., got 'x'``.
    """
    label = model or getattr(cls, "name", cls.__name__)
    out: dict[str, Any] = {}
    for name, value in params.items():
        if toml:
            value = coerce_toml(cls, name, value)
        alts = _alternatives(cls, name)
        if alts is None:
            out[name] = value
            continue
        ok, coerced = check_value(alts, value)
        if ok:
            out[name] = coerced
        else:
            from harness.models.errors import ModelParameterError

            raise ModelParameterError(f"model {label!r}: parameter {name!r} must be "
                                      f"{describe(cls, name)}, got {value!r}")
    check = getattr(cls, "check_params", None)
    if callable(check):
        check(out, label)
    return out
