"""Validate a request against a cube: which variables, how each enters, and which periods.

Internal to :mod:`vintages` (information sets, truths and revisions share it): every check of
a variable's series spec against its frequency, the panel's frequency and layout happens here,
once, at the public entry points.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any, NamedTuple

import numpy as np
import pandas as pd

from vintages.contract import SeriesSpec, choice
from vintages.errors import UnknownNameError
from vintages.periods import parse_periods
from vintages.transforms import PARTIAL_POLICIES, check_conversion, get_transform

if TYPE_CHECKING:
    from vintages.cube import Cube


class Series(NamedTuple):
    """One variable of a request, validated."""

    name: str
    spec: SeriesSpec
    convert: str | None  # monthly → quarterly method, None when no conversion applies
    partial: str  # partial-quarter policy
    freq: str  # the frequency its transformation runs at


def resolve(cube: Cube, name: str, spec: Any, freq: str, partial: str,
            layout: str = "common") -> Series:
    """Validate one variable's spec against the cube, the panel frequency and layout."""
    if name not in cube.meta:
        raise UnknownNameError(f"unknown variable {name!r}; expected one of {cube.variables}")
    s = SeriesSpec.coerce(spec, name)
    get_transform(s.transform)
    native = cube.freq_of(name)
    pol = s.partial if s.partial is not None else partial
    if layout == "native":
        if native == "M" and freq == "Q":
            raise ValueError(
                f"variable {name!r} is monthly and cannot keep its frequency on a quarterly "
                "axis; expected freq='M' with layout='native' (or layout='common' to convert it)"
            )
        if s.convert is not None:
            raise ValueError(
                f"variable {name!r}: 'convert' applies to the common layout only (the native "
                f"layout keeps every variable in its own frequency); got convert={s.convert!r}"
            )
        choice(pol, PARTIAL_POLICIES, f"partial-quarter policy for {name!r}")
        return Series(name, s, None, pol, native)
    if native == "Q" and freq == "M":
        raise ValueError(
            f"variable {name!r} is quarterly and cannot enter a monthly panel; "
            "expected freq='Q' (quarterly panels take monthly variables by conversion), "
            "or layout='native' (each variable in its own frequency on a monthly axis)"
        )
    if native == freq:
        if s.convert is not None:
            raise ValueError(
                f"variable {name!r}: 'convert' applies to monthly variables in a quarterly "
                f"panel only; {name!r} is {native} in a {freq} panel, got convert={s.convert!r}"
            )
        choice(pol, PARTIAL_POLICIES, f"partial-quarter policy for {name!r}")
        return Series(name, s, None, pol, freq)
    method = s.convert or "mean"
    try:
        check_conversion(method, s.transform, pol)
    except ValueError as exc:
        raise ValueError(f"variable {name!r}: {exc}") from None
    return Series(name, s, method, pol, freq)


def resolve_all(cube: Cube, variables, freq: str, partial: str,
                layout: str = "common") -> list[Series]:
    """Validate every variable of a request (mapping name -> spec, or names), in its order."""
    if isinstance(variables, str):
        variables = [variables]
    if isinstance(variables, Mapping):
        items = list(variables.items())
    elif isinstance(variables, Sequence):
        items = [(v, None) for v in variables]
    else:
        raise ValueError(
            f"variables: expected a mapping name -> series spec or a list of names; "
            f"got {type(variables).__name__}"
        )
    if not items:
        raise ValueError("variables: expected at least one variable; got none")
    names = [n for n, _ in items]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ValueError(f"variables: each name may appear once; got duplicates {dup}")
    return [resolve(cube, n, s, freq, partial, layout) for n, s in items]


def _example(freq: str) -> str:
    return "2005Q1" if freq == "Q" else "2005-01"


def to_ordinal(value, freq: str, what: str) -> int:
    """One period (label, Period or ordinal) as an ordinal of ``freq``."""
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return int(value)
    o, f = parse_periods([value])
    if f[0] != freq:
        raise ValueError(
            f"{what}: expected a {freq} period label (e.g. {_example(freq)}); got {value!r}"
        )
    return int(o[0])


def to_ordinals(periods, freq: str, what: str) -> np.ndarray:
    """Periods (labels, Periods or a PeriodIndex) as ordinals of ``freq``."""
    if isinstance(periods, (str, pd.Period)):
        periods = [periods]
    vals = (
        periods if isinstance(periods, pd.PeriodIndex) else np.asarray(list(periods), dtype=object)
    )
    if not len(vals):
        return np.zeros(0, dtype=np.int64)
    o, f = parse_periods(vals)
    bad = np.flatnonzero(f != freq)
    if len(bad):
        raise ValueError(
            f"{what}: expected {freq} periods (e.g. {_example(freq)}); got {vals[bad[0]]!r}"
        )
    return o


__all__ = ["Series", "resolve", "resolve_all", "to_ordinal", "to_ordinals"]
