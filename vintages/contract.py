"""The contract between :mod:`vintages` and the models: information sets, targets, series specs.

The containers below are what a model receives (:class:`InfoSet`, :class:`Targets`) and how a
user says how a variable enters it (:class:`SeriesSpec`) or which truth scores it
(:class:`TruthRule`); their fields may grow but never change meaning. The option vocabularies
accepted across information sets and truths live here too, once.

The cardinal rule
-----------------
An information set at origin ``o`` is computed from the vintage in force on ``o`` only (see
:mod:`vintages.infosets`): nothing released after ``o`` is ever in its panel, nor used as an
input to its transforms. The one deliberate exception is ``mode="pseudo"``
(pseudo-real-time), which ``InfoSet.mode`` records.
"""

from __future__ import annotations

import hashlib
import json
import types
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

if TYPE_CHECKING:  # annotations only: reading a contract type does not import xarray
    import xarray as xr

from vintages._types import FREQS
from vintages.periods import period_index, period_of_date
from vintages.transforms import _REGISTRY

#: ragged-edge policies of an information set
POLICIES: tuple[str, ...] = ("balance", "keep", "realign")
#: where the values come from: the vintage at the origin, or the latest one cut at its edge
MODES: tuple[str, ...] = ("pseudo", "real-time")
#: ``common``: every variable converted to the panel frequency; ``native``: each variable in its
#: own frequency, placed on the panel's (monthly) axis
PANEL_LAYOUTS: tuple[str, ...] = ("common", "native")
#: policies that make sense in the native layout (``realign`` would move quarterly values off
#: their quarters' last months)
NATIVE_POLICIES: tuple[str, ...] = ("balance", "keep")
TRUTH_FORMS: tuple[str, ...] = ("asof:YYYY-MM-DD", "first", "lag:NNND", "latest", "release:K")
#: every transformation name available (built-in and registered): a live, read-only view
TRANSFORMS: Mapping[str, Any] = types.MappingProxyType(_REGISTRY)


def choice(value, allowed, what: str) -> str:
    """``value`` if it is one of ``allowed``; else an OptionError (a ValueError) listing them."""
    if value not in allowed:
        from vintages.errors import OptionError

        raise OptionError(f"unknown {what} {value!r}; expected one of {sorted(allowed)}")
    return value


@dataclass(frozen=True)
class InfoSet:
    """The information set at one origin, on one panel axis.

    Two forms (``layout`` of :func:`vintages.infosets.build_infosets`):

    * **common** (the default): every variable is on the panel frequency ``freq``; a monthly
      variable in a quarterly panel is converted to quarters in levels inside each vintage
      (``conversions``), possibly from a partial quarter (``partial``). ``native_freq`` is empty.
    * **native** (for nowcasting models): the panel is on ONE monthly axis (``freq == "M"``).
      ``native_freq[v]`` is each variable's own frequency. A monthly variable is transformed
      at monthly frequency inside each vintage. A quarterly variable is transformed at
      quarterly frequency inside its vintage (so ``dlog_ann`` is ×400 quarter-on-quarter) and
      its value for quarter ``q`` sits on the row of ``q``'s last month
      (``q.asfreq("M", "end")``), with NaN in the quarter's other two months. The ragged edge
      is exactly as published at the origin: each monthly variable ends at its last published
      month, each quarterly one at the last month of its last published quarter; there is no
      partial-quarter conversion at all (``partial`` is None, ``conversions`` empty).
      ``current`` is the origin's month; ``last_observed[v]`` is a month (for a quarterly
      variable, its last quarter's last month) and ``native_last[v]`` the period in the
      variable's own frequency. Targets stay quarterly: build them with
      ``make_targets(info, variables, horizons, freq="Q")``, so horizon ``h`` targets the
      origin's quarter plus ``h``; a model places a target quarter on the panel's axis with
      :meth:`on_axis` (its last month).

    Attributes
    ----------
    origin : numpy.datetime64 (day)
        The day the forecast is made. No value in ``panel`` was released after it.
    freq : {"Q", "M"}
        Frequency of the panel's axis.
    panel : xarray.DataArray, dims ``(period, variable)``, float64
        Transformed values known at the origin; the ``period`` coordinate is a PeriodIndex of
        ``freq``. It runs to the latest period observed for any variable, so under the ``keep``
        policy some variables end in NaN (the ragged edge).
    current : pandas.Period
        The origin's own period in ``freq``: the period of horizon 0 in that frequency.
    last_observed : dict[str, pandas.Period]
        Per variable, the last period (of ``freq``) with a value in ``panel``.
    source_release : dict[str, numpy.datetime64]
        Per variable, the release date of its last observed value (provenance); for a
        monthly variable converted to quarterly, the release of the latest month of that quarter.
    policy : {"keep", "balance", "realign"}
        Ragged-edge policy that produced ``panel``.
    transforms : dict[str, str]
        Per variable, the transformation applied inside the vintage (e.g. ``"dlog_ann"``).
    partial : xarray.DataArray or None, dims ``(period, variable)``, bool
        True where a quarterly value of a monthly variable rests on fewer than three months.
        None when no variable was converted.
    mode : {"real-time", "pseudo"}
        ``real-time``: values of the vintage in force at the origin. ``pseudo``: values of the
        latest vintage cut at the real-time ragged edge (``source_release`` may then lie after
        the origin, on purpose).
    shifts : dict[str, int]
        Per variable, the vertical-realignment shift in periods (0 unless ``policy="realign"``):
        the panel row of period ``p`` holds the variable's value for reference period
        ``p - shifts[v]``.
    conversions : dict[str, str]
        Per monthly variable converted to quarterly, the conversion method (``"mean"`` ...).
    input_release : dict[str, numpy.datetime64]
        Per variable, the newest release date among *all* values of the vintage its
        transformation could read (an upper bound of what went in; ``<= origin`` in real time).
    native_last : dict[str, pandas.Period]
        Per variable, the last observed reference period in its own frequency, before
        conversion and shifting (for a monthly variable: the last month known).
    native_freq : dict[str, str]
        Per variable, its own frequency when the panel is in the native layout; empty in the
        common layout (every variable then is on ``freq``).
    """

    origin: np.datetime64
    freq: str
    panel: xr.DataArray
    current: pd.Period
    last_observed: dict[str, pd.Period]
    source_release: dict[str, np.datetime64]
    policy: str = "keep"
    transforms: dict[str, str] = field(default_factory=dict)
    partial: xr.DataArray | None = None
    mode: str = "real-time"
    shifts: dict[str, int] = field(default_factory=dict)
    conversions: dict[str, str] = field(default_factory=dict)
    input_release: dict[str, np.datetime64] = field(default_factory=dict)
    native_last: dict[str, pd.Period] = field(default_factory=dict)
    native_freq: dict[str, str] = field(default_factory=dict)

    @property
    def variables(self) -> list[str]:
        return [str(v) for v in self.panel["variable"].values]

    @property
    def periods(self) -> pd.PeriodIndex:
        return self.panel.indexes["period"]

    @property
    def layout(self) -> str:
        """``"native"`` when ``native_freq`` is set, else ``"common"``."""
        return "native" if self.native_freq else "common"

    def freq_of(self, variable: str) -> str:
        """The frequency a variable's values are in (its native one in the native layout)."""
        return self.native_freq.get(variable, self.freq)

    def on_axis(self, period) -> pd.Period:
        """The panel row of a period of any frequency: a quarter maps to its last month."""
        p = period if isinstance(period, pd.Period) else pd.Period(period)
        return p.asfreq(self.freq, how="end")

    def values(self) -> np.ndarray:
        """The panel as a ``(T, n)`` float64 array (rows oldest first)."""
        return np.asarray(self.panel.transpose("period", "variable").values, dtype=np.float64)

    def series(self, variable: str) -> pd.Series:
        """One variable's observed values (leading and trailing NaN removed).

        In the native layout a quarterly variable keeps its NaN months between quarters.
        """
        s = self.panel.sel(variable=variable).to_series()
        ok = s.notna().to_numpy()
        if not ok.any():
            return s.iloc[0:0]
        lo, hi = np.flatnonzero(ok)[[0, -1]]
        return s.iloc[lo : hi + 1]

    def data_hash(self) -> str:
        """A stable digest of the panel's values and coordinates (a cache-key ingredient).

        ``native_freq`` enters only when set, so digests of the common layout are unchanged.
        """
        h = hashlib.sha256()
        h.update(self.freq.encode())
        h.update(np.asarray(self.periods.asi8, dtype=np.int64).tobytes())
        h.update("\x1f".join(self.variables).encode())
        h.update(np.ascontiguousarray(self.values()).tobytes())
        h.update(str(self.current).encode())
        if self.native_freq:
            h.update(json.dumps(self.native_freq, sort_keys=True).encode())
        return h.hexdigest()


@dataclass(frozen=True)
class Targets:
    """What to forecast: variables × horizons, relative to the origin's current period.

    Horizon ``h`` targets period ``current + h`` in ``freq``: h < 0 backcast, h = 0 nowcast,
    h > 0 forecast.
    """

    variables: tuple[str, ...]
    horizons: tuple[int, ...]
    freq: str
    current: pd.Period

    def periods(self) -> pd.PeriodIndex:
        """Target period of each horizon."""
        return pd.PeriodIndex([self.current + int(h) for h in self.horizons], freq=self.freq)

    def steps_after(self, last: pd.Period) -> np.ndarray:
        """For each horizon, how many periods its target lies after ``last`` (≤ 0: already observed)."""
        return np.array(
            [(self.current + int(h)).ordinal - last.ordinal for h in self.horizons], dtype=np.int64
        )


def make_targets(info_or_origin, variables, horizons, freq: str | None = None) -> Targets:
    """Targets for an information set (or an origin date): variables × horizons.

    Parameters
    ----------
    info_or_origin : InfoSet or date-like
        The origin's current period (the period containing the origin date, in ``freq``) is
        horizon 0.
    variables : str or sequence of str
    horizons : int or sequence of int, or mapping ``{"min": a, "max": b}``
        Horizon ``h`` targets period ``current + h``.
    freq : {"Q", "M"}, optional
        Default: the information set's frequency, or ``"Q"`` for a date. For a native-layout
        information set (monthly axis) of a quarterly target, pass ``"Q"``.

    Returns
    -------
    Targets
    """
    if isinstance(info_or_origin, InfoSet):
        origin = info_or_origin.origin
        freq = freq or info_or_origin.freq
    else:
        origin = np.datetime64(pd.Timestamp(info_or_origin).date(), "D")
        freq = freq or "Q"
    choice(freq, FREQS, "target frequency")
    if isinstance(info_or_origin, InfoSet) and freq == info_or_origin.freq:
        current = info_or_origin.current
    else:
        current = period_index(period_of_date([origin], freq), freq)[0]
    if isinstance(variables, str):
        variables = [variables]
    variables = tuple(str(v) for v in variables)
    if not variables:
        raise ValueError("targets: expected at least one variable; got none")
    if isinstance(horizons, Mapping):
        unknown = sorted(k for k in horizons if k not in ("max", "min"))
        if unknown or "min" not in horizons or "max" not in horizons:
            raise ValueError(
                f"targets: horizons as a mapping needs exactly the keys ['max', 'min']; "
                f"got {sorted(horizons)}"
            )
        horizons = range(int(horizons["min"]), int(horizons["max"]) + 1)
    elif isinstance(horizons, (int, np.integer)):
        horizons = [horizons]
    hz = []
    for h in horizons:
        if isinstance(h, bool) or not isinstance(h, (int, np.integer)):
            raise ValueError(f"targets: horizons must be integers; got {h!r}")
        hz.append(int(h))
    if not hz:
        raise ValueError("targets: expected at least one horizon; got none")
    return Targets(variables, tuple(hz), freq, current)


@dataclass(frozen=True)
class SeriesSpec:
    """How one variable enters an information set or a truth.

    Attributes
    ----------
    transform : str
        A transformation name (:func:`vintages.transforms.transform_names`), applied inside each
        vintage after any conversion.
    convert : {"mean", "sum", "last", "mean3"} or None
        Monthly → quarterly conversion in levels (only for a monthly variable in a quarterly
        panel of the common layout; None means ``"mean"`` there). See
        :func:`vintages.transforms.months_to_quarters`.
    partial : {"keep", "drop"} or None
        Partial-quarter policy for this variable (None: the call's default).
    """

    transform: str = "level"
    convert: str | None = None
    partial: str | None = None

    _KEYS = ("convert", "partial", "transform")

    @classmethod
    def coerce(cls, value: Any, name: str = "?") -> SeriesSpec:
        """A SeriesSpec from a SeriesSpec, a mapping, a transformation name or None (level)."""
        if isinstance(value, SeriesSpec):
            return value
        if value is None:
            return cls()
        if isinstance(value, str):
            return cls(transform=value)
        if isinstance(value, Mapping):
            unknown = sorted(str(k) for k in value if k not in cls._KEYS)
            if unknown:
                raise ValueError(
                    f"variable {name!r}: unknown key(s) {unknown} in its series spec; "
                    f"allowed keys: {sorted(cls._KEYS)}"
                )
            return cls(
                transform=value.get("transform", "level"),
                convert=value.get("convert"),
                partial=value.get("partial"),
            )
        raise ValueError(
            f"variable {name!r}: expected a series spec (SeriesSpec, mapping with keys "
            f"{sorted(cls._KEYS)}, or a transform name); got {type(value).__name__}"
        )


@dataclass(frozen=True)
class TruthRule:
    """A parsed truth rule (see :func:`vintages.truths.parse_truth`)."""

    kind: str  # "asof" | "first" | "lag" | "latest" | "release"
    k: int | None = None
    days: int | None = None
    date: np.datetime64 | None = None

    def __str__(self) -> str:
        if self.kind == "release":
            return f"release:{self.k}"
        if self.kind == "lag":
            return f"lag:{self.days}D"
        if self.kind == "asof":
            return f"asof:{self.date}"
        return self.kind


__all__ = [
    "FREQS",
    "MODES",
    "NATIVE_POLICIES",
    "PANEL_LAYOUTS",
    "POLICIES",
    "TRANSFORMS",
    "TRUTH_FORMS",
    "InfoSet",
    "SeriesSpec",
    "Targets",
    "TruthRule",
    "make_targets",
]
