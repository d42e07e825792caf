"""Real-time information sets: what a forecaster could see at an origin, and the truths to score.

The two containers below are the contract between :mod:`vintages` and the models in
:mod:`harness.models`; their fields may grow but never change meaning.

The cardinal rule
-----------------
An information set at origin ``o`` is computed from the vintage in force on ``o`` only: for each
variable, the row of values :meth:`vintages.cube.FreqCube.asof_values` returns for ``o``. The
frequency conversion and the transformation act on that row alone (see
:mod:`vintages.transforms`), so nothing released after ``o`` is ever in the panel, nor used as
an input to its transforms. ``tests/properties/test_no_lookahead.py`` checks this as a law: the
information set built from the full store equals the one built from a store holding only the
releases dated on or before the origin.

The one deliberate exception is ``mode="pseudo"`` (pseudo-real-time), used to measure how much
revisions matter: there the values come from the *latest* vintage, cut at the ragged edge the
real-time vintage had at the origin. Its ``source_release`` then lies after the origin, as it
should, and ``InfoSet.mode`` says so.

Truths
------
:func:`truth_values` maps each target period to the value used for scoring, computed with the
same conversion and transformation inside the vintage the rule selects (``first``,
``release:K``, ``lag:NNND``, ``latest``, ``asof:YYYY-MM-DD``; see :func:`parse_truth`).
"""

from __future__ import annotations

import hashlib
import re
import types
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import xarray as xr

from vintages.calendar import check_origins
from vintages.errors import LookAheadError
from vintages.periods import format_periods, parse_periods, period_end, period_index, period_of_date
from vintages.transforms import (
    _REGISTRY,
    PARTIAL_POLICIES,
    apply_transform,
    check_conversion,
    get_transform,
    months_to_quarters,
)

if TYPE_CHECKING:
    from vintages.cube import Cube, FreqCube

POLICIES: tuple[str, ...] = ("balance", "keep", "realign")
MODES: tuple[str, ...] = ("pseudo", "real-time")
FREQS: tuple[str, ...] = ("M", "Q")
TRUTH_FORMS: tuple[str, ...] = ("asof:YYYY-MM-DD", "first", "lag:NNND", "latest", "release:K")
#: every transformation name available (built-in and registered): a live, read-only view
TRANSFORMS: Mapping[str, Any] = types.MappingProxyType(_REGISTRY)

_NAT = np.datetime64("NaT", "D")


@dataclass(frozen=True)
class InfoSet:
    """The information set at one origin, in one panel frequency.

    Attributes
    ----------
    origin : numpy.datetime64 (day)
        The day the forecast is made. No value in ``panel`` was released after it.
    freq : {"Q", "M"}
        Frequency of the panel (monthly variables are converted when ``freq == "Q"``).
    panel : xarray.DataArray, dims ``(period, variable)``, float64
        Transformed values known at the origin; the ``period`` coordinate is a PeriodIndex of
        ``freq``. It runs to the latest period observed for any variable, so under the ``keep``
        policy some variables end in NaN (the ragged edge).
    current : pandas.Period
        The origin's own period in ``freq``: the period of horizon 0.
    last_observed : dict[str, pandas.Period]
        Per variable, the last period with a value in ``panel``.
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
        Per variable, its own frequency (``"M"`` or ``"Q"``) in a native-frequency information
        set (``freq == "M"``: monthly variables stay monthly, a quarterly variable sits at its
        quarter's last month, NaN in the other two). Empty for the quarterly form.
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

    def values(self) -> np.ndarray:
        """The panel as a ``(T, n)`` float64 array (rows oldest first)."""
        return np.asarray(self.panel.transpose("period", "variable").values, dtype=np.float64)

    def series(self, variable: str) -> pd.Series:
        """One variable's observed values (leading and trailing NaN removed)."""
        s = self.panel.sel(variable=variable).to_series()
        ok = s.notna().to_numpy()
        if not ok.any():
            return s.iloc[0:0]
        lo, hi = np.flatnonzero(ok)[[0, -1]]
        return s.iloc[lo : hi + 1]

    def data_hash(self) -> str:
        """A stable digest of the panel's values and coordinates (a cache-key ingredient)."""
        h = hashlib.sha256()
        h.update(self.freq.encode())
        h.update(np.asarray(self.periods.asi8, dtype=np.int64).tobytes())
        h.update("\x1f".join(self.variables).encode())
        h.update(np.ascontiguousarray(self.values()).tobytes())
        h.update(str(self.current).encode())
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


# ====================================================================== series specifications
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
        panel; None means ``"mean"`` there). See :func:`vintages.transforms.months_to_quarters`.
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


def _choice(value, allowed: Sequence[str], what: str) -> str:
    if value not in allowed:
        raise ValueError(f"unknown {what} {value!r}; expected one of {sorted(allowed)}")
    return value


def _resolve(
    cube: Cube, name: str, spec: Any, freq: str, partial: str
) -> tuple[SeriesSpec, str | None, str]:
    """Validate one variable's spec against the cube and the panel frequency.

    Returns the spec, the conversion method (None when none applies) and the partial policy.
    """
    if name not in cube.meta:
        raise ValueError(f"unknown variable {name!r}; expected one of {cube.variables}")
    s = SeriesSpec.coerce(spec, name)
    get_transform(s.transform)
    native = cube.freq_of(name)
    pol = s.partial if s.partial is not None else partial
    if native == "Q" and freq == "M":
        raise ValueError(
            f"variable {name!r} is quarterly and cannot enter a monthly panel; "
            "expected freq='Q' (quarterly panels take monthly variables by conversion)"
        )
    if native == freq:
        if s.convert is not None:
            raise ValueError(
                f"variable {name!r}: 'convert' applies to monthly variables in a quarterly "
                f"panel only; {name!r} is {native} in a {freq} panel, got convert={s.convert!r}"
            )
        _choice(pol, PARTIAL_POLICIES, f"partial-quarter policy for {name!r}")
        return s, None, pol
    method = s.convert or "mean"
    try:
        check_conversion(method, s.transform, pol)
    except ValueError as exc:
        raise ValueError(f"variable {name!r}: {exc}") from None
    return s, method, pol


def _resolve_all(
    cube: Cube, variables, freq: str, partial: str
) -> list[tuple[str, SeriesSpec, str | None, str]]:
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
    return [(n, *_resolve(cube, n, s, freq, partial)) for n, s in items]


# ====================================================================== vintage rows → panel
@dataclass
class _Rows:
    """One variable's converted and transformed values in many vintages (rows)."""

    values: np.ndarray  # (n, T) transformed, panel frequency
    levels: np.ndarray  # (n, T) converted levels, before the transform
    first: int  # ordinal of column 0 in the panel frequency
    level_rel: np.ndarray  # (n, T) datetime64[D] release of each level (latest month if converted)
    count: np.ndarray | None  # (n, T) months known per quarter (converted only)
    partial: np.ndarray | None  # (n, T) bool (converted only)
    native_last: np.ndarray  # (n,) int64 ordinal of the last known native period (-1: none)
    native_has: np.ndarray  # (n,) bool
    input_rel: np.ndarray  # (n,) datetime64[D] newest release in the row (NaT when empty)


def _last_index(obs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the last True along the last axis, and whether there is one."""
    has = obs.any(axis=-1)
    return obs.shape[-1] - 1 - obs[..., ::-1].argmax(axis=-1), has


def _max_date(rel: np.ndarray) -> np.ndarray:
    """Newest date along the last axis (NaT when there is none)."""
    if not rel.shape[-1]:
        return np.full(rel.shape[:-1], _NAT)
    # NaT is the smallest int64, so a maximum over the int view skips it unless all are NaT.
    return rel.astype("datetime64[D]").view(np.int64).max(axis=-1).view("datetime64[D]")


def _source(
    fc: FreqCube, rows: np.ndarray, dates: np.ndarray, mode: str
) -> tuple[np.ndarray, np.ndarray]:
    """Native values and their release dates, (n_dates, n_rows, n_periods), for the mode."""
    vals, rel = fc.asof_values(dates)
    vals, rel = vals[:, rows], rel[:, rows].astype("datetime64[D]")
    if mode == "pseudo" and len(fc.releases):
        # Same ragged edge as in real time, values from the latest vintage.
        last, has = _last_index(~np.isnan(vals))
        keep = (np.arange(vals.shape[-1]) <= last[..., None]) & has[..., None]
        latest = fc.known[-1][rows]
        src = fc.src[-1][rows]
        lrel = np.where(src >= 0, fc.releases[np.maximum(src, 0)], _NAT).astype("datetime64[D]")
        vals = np.where(keep, latest[None], np.nan)
        rel = np.where(keep & ~np.isnan(latest)[None], lrel[None], _NAT)
    return vals, rel


def _prepare(
    name: str,
    vals: np.ndarray,
    rel: np.ndarray,
    first_native: int,
    native: str,
    spec: SeriesSpec,
    method: str | None,
    partial: str,
    freq: str,
) -> _Rows:
    """Convert (if asked) and transform rows of one variable; each row one vintage."""
    last, has = _last_index(~np.isnan(vals))
    native_last = np.where(has, first_native + last, -1)
    input_rel = _max_date(rel)
    count = part = None
    if method is None:
        levels, level_rel, first = vals, rel, int(first_native)
    else:
        try:
            levels, first, count, lastm = months_to_quarters(
                vals, first_native, method, partial=partial
            )
        except ValueError as exc:
            raise ValueError(f"variable {name!r}: {exc}") from None
        level_rel = (
            np.take_along_axis(rel, np.maximum(lastm, 0), axis=1)
            if rel.shape[1]
            else np.full(levels.shape, _NAT)
        )
        level_rel = np.where((lastm >= 0) & ~np.isnan(levels), level_rel, _NAT)
        part = (count > 0) & (count < 3) & ~np.isnan(levels)
    try:
        values = apply_transform(spec.transform, levels, freq)
    except ValueError as exc:
        raise ValueError(f"variable {name!r}: {exc}") from None
    if part is not None:
        part &= ~np.isnan(values)
    return _Rows(values, levels, first, level_rel, count, part, native_last, has, input_rel)


def _rows_for(cube: Cube, resolved, dates: np.ndarray, freq: str, mode: str) -> dict[str, _Rows]:
    """Every requested variable's rows at ``dates``: one as-of call per frequency."""
    out: dict[str, _Rows] = {}
    for f in FREQS:
        group = [r for r in resolved if cube.freq_of(r[0]) == f]
        if not group:
            continue
        fc = cube.parts[f]
        rows = np.searchsorted(fc.variables, [r[0] for r in group])
        vals, rel = _source(fc, rows, dates, mode)
        first = int(fc.periods[0]) if len(fc.periods) else 0
        for j, (name, spec, method, pol) in enumerate(group):
            out[name] = _prepare(name, vals[:, j], rel[:, j], first, f, spec, method, pol, freq)
    return out


def _to_ordinal(value, freq: str, what: str) -> int:
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return int(value)
    o, f = parse_periods([value])
    if f[0] != freq:
        raise ValueError(
            f"{what}: expected a {freq} period label (e.g. "
            f"{'2005Q1' if freq == 'Q' else '2005-01'}); got {value!r}"
        )
    return int(o[0])


def _to_ordinals(periods, freq: str, what: str) -> np.ndarray:
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
            f"{what}: expected {freq} periods (e.g. {'2005Q1' if freq == 'Q' else '2005-01'}); "
            f"got {vals[bad[0]]!r}"
        )
    return o


def build_infosets(
    cube: Cube,
    origins,
    variables,
    *,
    freq: str = "Q",
    policy: str = "keep",
    mode: str = "real-time",
    first_period=None,
    partial: str = "keep",
) -> list[InfoSet]:
    """The information set at each origin, all origins computed together.

    For every origin, each variable's vintage in force that day (one vectorised as-of call per
    frequency for all origins) is converted to the panel frequency in levels, transformed
    inside the vintage (all origins at once, one row per origin), then cut and packaged.

    Parameters
    ----------
    cube : Cube
    origins : iterable of date-like
        Checked with :func:`vintages.calendar.check_origins`; the result follows their sorted,
        unique order.
    variables : mapping name -> spec, or sequence of names
        A spec is a :class:`SeriesSpec`, a mapping ``{"transform": ..., "convert": ...,
        "partial": ...}`` or a transformation name; a bare name means ``level``. The panel's
        columns follow this order.
    freq : {"Q", "M"}
        Panel frequency. Monthly variables enter a quarterly panel through their ``convert``
        method (default ``"mean"``); quarterly variables cannot enter a monthly panel.
    policy : {"keep", "balance", "realign"}
        The ragged edge. ``keep``: the panel runs to the latest period any variable has; the
        others end in NaN. ``balance``: the panel is cut at the earliest of the variables' last
        observed periods, so it is balanced at its end. ``realign`` (vertical realignment,
        Altissimo et al. 2001): each variable is shifted forward by ``shifts[v]`` periods so
        that its last observation sits on the panel's last row, the latest period any variable
        has. The ``period`` coordinate is then the period of the *best-covered* variables; the
        row labelled ``p`` holds variable ``v``'s value for ``p - shifts[v]``, and the shifted
        series start with NaN instead of ending with it.
    mode : {"real-time", "pseudo"}
        ``real-time``: the vintage in force at the origin. ``pseudo``: the latest vintage, cut
        for each variable at the last period the real-time vintage had (revised values, the
        same ragged edge), in native frequency before conversion.
    first_period : period label or Period, optional
        The panel's first period (transformations are computed before the cut, so the first
        growth rate uses the level before it). Default: the first period with any value.
    partial : {"keep", "drop"}
        Default partial-quarter policy for converted monthly variables (a series spec may
        override it). ``keep``: ``mean``/``mean3`` of the months known, flagged in
        ``InfoSet.partial``; ``sum``/``last`` need the three months. ``drop``: NaN.

    Returns
    -------
    list of InfoSet
        One per origin, sorted by origin.

    Raises
    ------
    LookAheadError
        An origin outside the store's coverage, or a variable with no (transformed) value at
        an origin (its first release comes later).
    ValueError
        Unknown option, variable, transformation or conversion (the message lists the valid ones).

    References
    ----------
    Altissimo, F., Bassanetti, A., Cristadoro, R., Forni, M., Lippi, M., Reichlin, L. and
    Veronese, G. (2001). EuroCOIN: a real time coincident indicator of the euro area business
    cycle. CEPR Discussion Paper 3108.

    Examples
    --------
    >>> infos = build_infosets(cube, quarterly(15, 2, "2006-01-01", "2026-11-30"),
    ...                        {"gdp": "dlog_ann", "cpi": {"transform": "dlog_ann", "convert": "mean3"}},
    ...                        policy="keep")                          # doctest: +SKIP
    >>> infos[0].panel.to_pandas().tail()                              # doctest: +SKIP
    """
    _choice(freq, FREQS, "panel frequency")
    _choice(policy, POLICIES, "ragged-edge policy")
    _choice(mode, MODES, "mode")
    _choice(partial, PARTIAL_POLICIES, "partial-quarter policy")
    resolved = _resolve_all(cube, variables, freq, partial)
    o = check_origins(cube, origins)
    rows = _rows_for(cube, resolved, o, freq, mode)
    names = [r[0] for r in resolved]
    n_o, n_v = len(o), len(names)

    fp = None if first_period is None else _to_ordinal(first_period, freq, "first_period")
    lo = min(r.first for r in rows.values())
    hi = max(r.first + r.values.shape[1] - 1 for r in rows.values())
    if fp is not None:
        lo = min(lo, fp)
        hi = max(hi, fp)
    T = hi - lo + 1
    big = np.full((n_o, n_v, T), np.nan)
    brel = np.full((n_o, n_v, T), _NAT)
    converted = any(r.partial is not None for r in rows.values())
    bpart = np.zeros((n_o, n_v, T), dtype=bool)
    for j, name in enumerate(names):
        r = rows[name]
        sl = slice(r.first - lo, r.first - lo + r.values.shape[1])
        big[:, j, sl] = r.values
        brel[:, j, sl] = r.level_rel
        if r.partial is not None:
            bpart[:, j, sl] = r.partial

    last, has = _last_index(~np.isnan(big))
    if not has.all():
        oi, vi = np.nonzero(~has)
        name = names[vi[0]]
        when = [str(o[i]) for i in oi[vi == vi[0]]]
        first_rel = cube.release_dates(name)
        raise LookAheadError(
            f"variable {name!r} has no value ({resolved[vi[0]][1].transform}) at "
            f"{len(when)} origin(s) ({', '.join(when[:3])}{' ...' if len(when) > 3 else ''}); "
            f"its first release is {first_rel[0] if len(first_rel) else 'never'} (and a "
            "transform may need several periods); expected origins where every variable has "
            "a value (start the origins later or leave the variable out)"
        )

    shift = np.zeros((n_o, n_v), dtype=np.int64)
    if policy == "balance":
        end = last.min(axis=1)
    else:
        end = last.max(axis=1)
    if policy == "realign":
        shift = end[:, None] - last
        idx = np.arange(T)[None, None, :] - shift[:, :, None]
        ok = idx >= 0
        idx = np.maximum(idx, 0)
        big = np.where(ok, np.take_along_axis(big, idx, axis=-1), np.nan)
        brel = np.where(ok, np.take_along_axis(brel, idx, axis=-1), _NAT)
        bpart = ok & np.take_along_axis(bpart, idx, axis=-1)
    tt = np.arange(T)
    obs = ~np.isnan(big) & (tt[None, None, :] <= end[:, None, None])
    if fp is not None:
        start = np.full(n_o, fp - lo)
        obs &= tt[None, None, :] >= start[:, None, None]
        if (start > end).any():
            i = int(np.argmax(start > end))
            raise ValueError(
                f"first_period {format_periods([fp], freq)[0]} lies after the panel's last "
                f"period {format_periods([lo + end[i]], freq)[0]} at origin {o[i]}; "
                "expected an earlier first_period"
            )
    else:
        start = obs.any(axis=1).argmax(axis=1)
    lastobs, has = _last_index(obs)
    if not has.all():
        oi, vi = np.nonzero(~has)
        i = oi[0]
        window = format_periods([lo + start[i], lo + end[i]], freq)
        raise ValueError(
            f"variable {names[vi[0]]!r} has no value in the panel window {window[0]} to "
            f"{window[1]} at origin {o[i]} (policy {policy!r}, first_period "
            f"{None if fp is None else format_periods([fp], freq)[0]}); expected every "
            "variable to overlap the window (choose another policy, an earlier "
            "first_period, or leave the variable out)"
        )

    pidx = period_index(np.arange(lo, hi + 1), freq)
    pobj = np.asarray(pidx.astype(object))  # Period objects, indexed per variable below
    current = np.asarray(period_index(period_of_date(o, freq), freq).astype(object))
    oi = np.arange(n_o)[:, None]
    vi = np.arange(n_v)[None, :]
    src = brel[oi, vi, lastobs]
    inrel = np.stack([rows[n].input_rel for n in names], axis=1)
    src = np.where(np.isnat(src), inrel, src)
    native = {
        n: np.asarray(
            period_index(
                np.where(rows[n].native_has, rows[n].native_last, 0), cube.freq_of(n)
            ).astype(object)
        )
        for n in names
    }
    transforms = {n: s.transform for n, s, _, _ in resolved}
    conversions = {n: m for n, _, m, _ in resolved if m is not None}
    var_coord = np.array(names, dtype=object)

    out = []
    # Slicing one template and swapping its data is several times faster than building a
    # DataArray (and its indexes) per origin; the data are fresh copies, never views of `big`.
    tmpl = xr.DataArray(
        np.empty((T, n_v)),
        dims=("period", "variable"),
        coords={"period": pidx, "variable": var_coord},
        name="value",
    )
    ptmpl = tmpl.copy(deep=False, data=np.zeros((T, n_v), dtype=bool)).rename("partial")
    for i in range(n_o):
        sl = slice(int(start[i]), int(end[i]) + 1)
        panel = tmpl.isel(period=sl).copy(deep=False, data=np.ascontiguousarray(big[i, :, sl].T))
        part = (
            ptmpl.isel(period=sl).copy(deep=False, data=np.ascontiguousarray(bpart[i, :, sl].T))
            if converted
            else None
        )
        out.append(
            InfoSet(
                origin=o[i],
                freq=freq,
                panel=panel,
                current=current[i],
                last_observed={n: pobj[lastobs[i, j]] for j, n in enumerate(names)},
                source_release={n: src[i, j] for j, n in enumerate(names)},
                policy=policy,
                transforms=dict(transforms),
                partial=part,
                mode=mode,
                shifts={n: int(shift[i, j]) for j, n in enumerate(names)},
                conversions=dict(conversions),
                input_release={n: inrel[i, j] for j, n in enumerate(names)},
                native_last={n: native[n][i] for n in names},
            )
        )
    return out


def build_infoset(cube: Cube, origin, variables, **kwargs) -> InfoSet:
    """The information set at one origin (see :func:`build_infosets` for the options)."""
    return build_infosets(cube, [origin], variables, **kwargs)[0]


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
        Default: the information set's frequency, or ``"Q"`` for a date.

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
    _choice(freq, FREQS, "target frequency")
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


# ====================================================================== truths
@dataclass(frozen=True)
class TruthRule:
    """A parsed truth rule (see :func:`parse_truth`)."""

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


_RELEASE = re.compile(r"^release:(\d+)$")
_LAG = re.compile(r"^lag:(\d+)[Dd]$")
_ASOF = re.compile(r"^asof:(\d{4}-\d{2}-\d{2})$")


def parse_truth(rule: str | TruthRule) -> TruthRule:
    """Parse a truth rule.

    Valid forms: ``first`` (the first release), ``release:K`` (the K-th estimate, K ≥ 1),
    ``lag:NNND`` (the estimate in force NNN days after the period ended), ``latest`` (the
    store's latest vintage), ``asof:YYYY-MM-DD`` (the vintage of that day).

    Raises
    ------
    ValueError
        For anything else; the message lists the valid forms.
    """
    if isinstance(rule, TruthRule):
        return rule
    s = str(rule).strip() if isinstance(rule, str) else None
    forms = ", ".join(TRUTH_FORMS)
    if s in ("first", "latest"):
        return TruthRule(s)
    if s is not None and (m := _RELEASE.match(s)):
        k = int(m.group(1))
        if k < 1:
            raise ValueError(f"truth rule {rule!r}: the estimate number K must be ≥ 1; got {k}")
        return TruthRule("release", k=k)
    if s is not None and (m := _LAG.match(s)):
        return TruthRule("lag", days=int(m.group(1)))
    if s is not None and (m := _ASOF.match(s)):
        try:
            d = np.datetime64(pd.Timestamp(m.group(1)).date(), "D")
        except ValueError:
            raise ValueError(
                f"truth rule {rule!r}: {m.group(1)!r} is not a calendar date"
            ) from None
        return TruthRule("asof", date=d)
    raise ValueError(
        f"unknown truth rule {rule!r}; expected one of: {forms} "
        "(e.g. 'release:2', 'lag:365D', 'asof:2020-06-30')"
    )


def _vintage_dates(
    cube: Cube, rule: TruthRule, fc: FreqCube, i: int, t: np.ndarray, freq: str, converted: bool
) -> tuple[np.ndarray, list[str | None]]:
    """The vintage day each target's truth is read from (NaT with a reason where there is none)."""
    n = len(t)
    last_day = cube.last_release
    dates = np.full(n, _NAT)
    reasons: list[str | None] = [None] * n
    labels = format_periods(t, freq)
    if rule.kind in ("first", "release"):
        nrel = len(fc.releases)
        obs_all = ~np.isnan(fc.raw[:, i, :])
        p0 = int(fc.periods[0]) if len(fc.periods) else 0
        if converted:
            cols = (3 * t)[:, None] + np.arange(3)[None, :] - p0  # (n, 3) month columns
        else:
            cols = (t - p0)[:, None]
        inside = (cols >= 0) & (cols < obs_all.shape[1])
        obs = (
            obs_all[:, np.clip(cols, 0, max(obs_all.shape[1] - 1, 0))] & inside[None]
            if obs_all.shape[1]
            else np.zeros((nrel,) + cols.shape, dtype=bool)
        )
        # A quarter of a monthly variable counts as published once all three months are.
        first_idx, has_each = obs.argmax(axis=0), obs.any(axis=0)
        complete = has_each.all(axis=1)
        done = np.where(complete, first_idx.max(axis=1), nrel)
        months_seen = has_each.sum(axis=1)
        if rule.kind == "first":
            has = complete
            idx = done
            n_so_far = complete.astype(int)
        else:
            pub = obs.any(axis=2) & (np.arange(nrel)[:, None] >= done[None, :])
            hit = pub & (np.cumsum(pub, axis=0) == rule.k)
            has = hit.any(axis=0)
            idx = hit.argmax(axis=0)
            n_so_far = pub.sum(axis=0)
        dates[has] = fc.releases[idx[has]] if nrel else _NAT
        for j in np.flatnonzero(~has):
            if not complete[j]:
                if converted and months_seen[j]:
                    reasons[j] = (
                        f"only {months_seen[j]} of 3 months of {labels[j]} published by {last_day}"
                    )
                else:
                    reasons[j] = f"not yet published by {last_day}"
            else:
                s = "" if n_so_far[j] == 1 else "s"
                reasons[j] = f"only {n_so_far[j]} release{s} of {labels[j]} so far (by {last_day})"
        return dates, reasons
    if rule.kind == "latest":
        dates[:] = last_day
    elif rule.kind == "asof":
        dates[:] = rule.date
        if rule.date > last_day:
            dates[:] = _NAT
            reasons = [f"asof date {rule.date} lies after the store's last release {last_day}"] * n
    else:  # lag
        dates = period_end(t, freq) + np.timedelta64(int(rule.days), "D")
        late = dates > last_day
        for j in np.flatnonzero(late):
            reasons[j] = (
                f"no vintage old enough: {rule.days} days after the end of {labels[j]} is "
                f"{dates[j]}, after the store's last release {last_day}"
            )
        dates = np.where(late, _NAT, dates)
    return dates, reasons


def truth_values(
    cube: Cube,
    rule: str | TruthRule,
    variable: str,
    spec=None,
    target_periods=None,
    freq: str = "Q",
) -> tuple[np.ndarray, np.ndarray, list[str | None]]:
    """The realised value of each target period under a truth rule, transformed inside its vintage.

    For each target period the rule picks one vintage (a day); the variable's values in that
    vintage are converted and transformed exactly as in an information set, and the result at
    the target period is the truth. So the ``first`` truth of ``dlog_ann`` gdp in 2010Q1 is the
    growth rate computed from the levels of 2010Q1 and 2009Q4 *as published in the release that
    first published 2010Q1*.

    Vintage picked by each rule:

    * ``first``: the first release of the target period;
    * ``release:K``: the K-th release that published the target period (a re-publication of an
      unchanged value counts, as in a release triangle);
    * ``lag:NNND``: the vintage in force NNN days after the period's last day;
    * ``latest``: the store's last release day;
    * ``asof:YYYY-MM-DD``: that day.

    For a monthly variable converted to quarterly, a quarter counts as *published* once all
    three of its months are: its first release is the day the last of its months first
    appeared, and its K-th release the K-th day from then on that published any of its
    months. A truth never rests on a partial quarter (fewer than three months gives NaN).

    Parameters
    ----------
    cube : Cube
    rule : str or TruthRule
        See :func:`parse_truth`.
    variable : str
    spec : SeriesSpec, mapping, transform name or None
        As in :func:`build_infosets` (None: ``level``).
    target_periods : PeriodIndex or sequence of labels/Periods, optional
        Default: every period of the variable's period axis (in ``freq``).
    freq : {"Q", "M"}
        Frequency of the targets.

    Returns
    -------
    values : ndarray of float64, shape (n,)
        NaN where the truth is not (yet) available; never imputed.
    release_dates : ndarray of datetime64[D], shape (n,)
        Release date of the target period's own value in the vintage used (for a converted
        monthly variable, that of the quarter's latest month); NaT where missing.
    reasons : list of (str or None)
        Why a truth is missing (e.g. ``"not yet published by 2026-11-30"``); None where present.

    Examples
    --------
    >>> v, rel, why = truth_values(cube, "release:2", "gdp", "dlog_ann",
    ...                            pd.period_range("2010Q1", "2010Q4", freq="Q"))  # doctest: +SKIP
    """
    r = parse_truth(rule)
    _choice(freq, FREQS, "truth frequency")
    _, s, method, _ = _resolve_all(cube, {variable: spec}, freq, "drop")[0]
    fc, i = cube.part(variable)
    if target_periods is None:
        p = fc.periods
        t = np.unique(p // 3) if method is not None else np.asarray(p, dtype=np.int64)
    else:
        t = _to_ordinals(target_periods, freq, "target_periods")
    n = len(t)
    values = np.full(n, np.nan)
    rel_out = np.full(n, _NAT)
    if n == 0:
        return values, rel_out, []
    dates, reasons = _vintage_dates(cube, r, fc, i, t, freq, method is not None)
    ok = ~np.isnat(dates)
    if ok.any():
        ud, inv = np.unique(dates[ok], return_inverse=True)
        # Truths never use a partial quarter, whatever the spec's partial policy.
        rows = _rows_for(cube, [(variable, s, method, "drop")], ud, freq, "real-time")[variable]
        col = t[ok] - rows.first
        inside = (col >= 0) & (col < rows.values.shape[1])
        cc = np.clip(col, 0, max(rows.values.shape[1] - 1, 0))
        if rows.values.shape[1]:
            v = np.where(inside, rows.values[inv, cc], np.nan)
            lv = np.where(inside, rows.levels[inv, cc], np.nan)
            rr = np.where(inside & ~np.isnan(v), rows.level_rel[inv, cc], _NAT)
            cnt = np.where(inside, rows.count[inv, cc], 0) if rows.count is not None else None
        else:
            v = lv = np.full(len(col), np.nan)
            rr = np.full(len(col), _NAT)
            cnt = np.zeros(len(col), dtype=int) if method is not None else None
        values[ok], rel_out[ok] = v, rr
        labels = format_periods(t, freq)
        where = np.flatnonzero(ok)
        for k in np.flatnonzero(np.isnan(v)):
            j = where[k]
            d = dates[j]
            after = f" ({r.days} days after the period ended)" if r.kind == "lag" else ""
            if cnt is not None and 0 < cnt[k] < 3:
                reasons[j] = f"only {cnt[k]} of 3 months of {labels[j]} published by {d}{after}"
            elif np.isnan(lv[k]):
                reasons[j] = (
                    f"not yet published by {d}"
                    if r.kind == "latest"
                    else f"{labels[j]} not published by {d}{after}"
                )
            else:
                reasons[j] = (
                    f"{s.transform} of {labels[j]} undefined in the vintage of {d} "
                    "(an earlier period it needs is missing)"
                )
    return values, rel_out, reasons


def truth_table(cube: Cube, rules, variables_specs, periods=None, freq: str = "Q") -> pd.DataFrame:
    """Truths of several rules and variables as a tidy table.

    Parameters
    ----------
    cube : Cube
    rules : str or sequence of str
    variables_specs : mapping name -> spec, or sequence of names (level)
    periods : target periods, optional
        The same for every variable (default: each variable's own period axis).
    freq : {"Q", "M"}

    Returns
    -------
    DataFrame
        Columns ``rule``, ``variable``, ``period`` (label), ``value``, ``release`` (datetime64)
        and ``reason`` (None where the truth is present).
    """
    if isinstance(rules, (str, TruthRule)):
        rules = [rules]
    resolved = _resolve_all(cube, variables_specs, freq, "drop")
    frames = []
    for rule in rules:
        rname = str(parse_truth(rule))
        for name, s, _, _ in resolved:
            v, rel, why = truth_values(cube, rule, name, s, periods, freq=freq)
            t = (
                _to_ordinals(periods, freq, "periods")
                if periods is not None
                else (
                    np.unique(cube.part(name)[0].periods // 3)
                    if cube.freq_of(name) != freq
                    else cube.part(name)[0].periods
                )
            )
            frames.append(
                pd.DataFrame(
                    {
                        "rule": rname,
                        "variable": name,
                        "period": format_periods(t, freq),
                        "value": v,
                        "release": rel.astype("datetime64[ns]"),
                        "reason": why,
                    }
                )
            )
    cols = ["rule", "variable", "period", "value", "release", "reason"]
    return pd.concat(frames, ignore_index=True)[cols] if frames else pd.DataFrame(columns=cols)


__all__ = [
    "MODES",
    "POLICIES",
    "TRANSFORMS",
    "TRUTH_FORMS",
    "InfoSet",
    "SeriesSpec",
    "Targets",
    "TruthRule",
    "build_infoset",
    "build_infosets",
    "make_targets",
    "parse_truth",
    "truth_table",
    "truth_values",
]
