"""The release cube (variable × reference period × release date) and vectorised as-of selection.

One cube per frequency: quarterly and monthly variables keep their own period axis. Inside, the
published values are held as a dense array ``(release, variable, period)`` with NaN where nothing
was published. The as-of view is precomputed once by a forward fill along the release axis
(a running maximum of "last release index that published this cell"); the information known on
any day ``d`` is then the slice at ``searchsorted(release_dates, d, "right") - 1``: no filtering
per origin, no dependence on an optional accelerator.

Conventions
-----------
* A value released on day ``d`` is known from ``d`` on (``asof(d)`` includes releases dated ``d``).
* The *k*-th estimate of a cell is the value in the *k*-th release that published that cell
  (a re-publication of an unchanged value counts as a release, as in a release triangle).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
import xarray as xr

from vintages.periods import parse_periods, period_end, period_index


def _as_day(date) -> np.datetime64:
    return np.datetime64(pd.Timestamp(date).date(), "D")


@dataclass
class FreqCube:
    """The releases of the variables of one frequency."""

    freq: str
    variables: np.ndarray  # (n_var,) str, sorted
    periods: np.ndarray  # (n_period,) int64 ordinals, consecutive
    releases: np.ndarray  # (n_release,) datetime64[D], sorted unique
    raw: np.ndarray  # (n_release, n_var, n_period) float64, NaN = not published that day
    known: np.ndarray = field(init=False)  # forward-filled along the release axis
    src: np.ndarray = field(init=False)  # (n_release, n_var, n_period) int32 release index of `known`, -1 none

    def __post_init__(self):
        nr = self.raw.shape[0]
        obs = ~np.isnan(self.raw)
        idx = np.where(obs, np.arange(nr, dtype=np.int32)[:, None, None], np.int32(-1))
        np.maximum.accumulate(idx, axis=0, out=idx)
        self.src = idx
        known = np.take_along_axis(self.raw, np.maximum(idx, 0), axis=0)
        known[idx < 0] = np.nan
        self.known = known

    @cached_property
    def period_index(self) -> pd.PeriodIndex:
        return period_index(self.periods, self.freq)

    def release_index(self, dates) -> np.ndarray:
        """Index of the last release on or before each date (-1 when none)."""
        d = np.asarray(dates, dtype="datetime64[D]")
        return np.searchsorted(self.releases, d, side="right") - 1

    def asof_values(self, dates) -> tuple[np.ndarray, np.ndarray]:
        """Known values and their release dates at each date: arrays (n_dates, n_var, n_period)."""
        j = np.atleast_1d(self.release_index(dates))
        if not len(self.releases):  # nothing published yet: every cell unknown on every date
            shape = (len(j), len(self.variables), len(self.periods))
            return np.full(shape, np.nan), np.full(shape, np.datetime64("NaT"), "datetime64[D]")
        jj = np.maximum(j, 0)
        vals = self.known[jj]
        src = self.src[jj]
        if (j < 0).any():
            vals = vals.copy()
            src = src.copy()
            vals[j < 0] = np.nan
            src[j < 0] = -1
        rel = np.where(src >= 0, self.releases[np.maximum(src, 0)], np.datetime64("NaT"))
        return vals, rel

    def to_array(self, values: np.ndarray, rel: np.ndarray | None, name: str) -> xr.DataArray:
        coords = {"variable": self.variables, "period": self.period_index}
        da = xr.DataArray(values, dims=("variable", "period"), coords=coords, name=name)
        if rel is not None:
            da = da.assign_coords(release_date=(("variable", "period"), rel))
        return da


class Vintage:
    """What was known on one day: per frequency, values (variable, period) and their release dates.

    A light view: the numbers are plain arrays sliced from the cube; :attr:`arrays` builds the
    xarray form (a DataArray per frequency with a ``release_date`` coordinate) on first use.
    """

    def __init__(self, date, parts: dict[str, tuple[FreqCube, np.ndarray, np.ndarray]]):
        self.date = _as_day(date)
        self._parts = parts
        self._arrays: dict[str, xr.DataArray] | None = None

    @property
    def arrays(self) -> dict[str, xr.DataArray]:
        """Per frequency, a DataArray (variable, period) with a ``release_date`` coordinate."""
        if self._arrays is None:
            self._arrays = {f: fc.to_array(v, r, "value") for f, (fc, v, r) in self._parts.items()}
        return self._arrays

    def __getitem__(self, variable: str) -> pd.Series:
        """The variable's series as known that day (PeriodIndex), without leading/trailing gaps."""
        for fc, vals, _ in self._parts.values():
            i = np.searchsorted(fc.variables, variable)
            if i < len(fc.variables) and fc.variables[i] == variable:
                x = vals[i]
                ok = ~np.isnan(x)
                if not ok.any():
                    return pd.Series([], index=fc.period_index[:0], dtype=np.float64, name="value")
                lo, hi = np.flatnonzero(ok)[[0, -1]]
                return pd.Series(x[lo:hi + 1], index=fc.period_index[lo:hi + 1], name="value")
        raise KeyError(f"unknown variable {variable!r}; known: {sorted(self.variables)}")

    @property
    def variables(self) -> list[str]:
        return [str(v) for fc, _, _ in self._parts.values() for v in fc.variables]

    def to_frame(self) -> pd.DataFrame:
        """Long table: variable, period (label), value, release (date of the release it came from)."""
        from vintages.periods import format_periods

        frames = []
        for fc, vals, rel in self._parts.values():
            nv, npd = vals.shape
            if nv * npd == 0:
                continue
            v = np.repeat(fc.variables, npd)
            p = np.tile(format_periods(fc.periods, fc.freq), nv)
            x = vals.ravel()
            ok = ~np.isnan(x)
            frames.append(pd.DataFrame({"variable": v[ok], "period": p[ok], "value": x[ok],
                                        "release": rel.ravel()[ok]}))
        if not frames:
            return pd.DataFrame(columns=["variable", "period", "value", "release"])
        return pd.concat(frames, ignore_index=True)


class Cube:
    """Every release of every variable, by frequency, with vectorised as-of and estimate views.

    Build it with :meth:`vintages.store.VintageStore.cube` (or :meth:`from_log` on a table).
    """

    def __init__(self, parts: dict[str, FreqCube], meta: dict[str, dict], checksum: str | None = None):
        self.parts = parts
        self.meta = meta
        self.checksum = checksum

    @classmethod
    def from_log(cls, log: pd.DataFrame, meta: dict[str, dict], *, variables=None,
                 checksum: str | None = None) -> Cube:
        """Build from a long table (variable, period, release, value) of values in force."""
        names = sorted(meta) if variables is None else sorted(variables)
        unknown = [v for v in names if v not in meta]
        if unknown:
            raise KeyError(f"unknown variable(s) {unknown}; known: {sorted(meta)}")
        log = log[log["variable"].isin(names)]
        parts: dict[str, FreqCube] = {}
        for f in ("Q", "M"):
            vars_f = np.array([v for v in names if meta[v]["freq"] == f], dtype=object)
            if not len(vars_f):
                continue
            sub = log[log["variable"].isin(vars_f)]
            ords = parse_periods(sub["period"].to_numpy())[0] if len(sub) else np.zeros(0, np.int64)
            rel = sub["release"].to_numpy().astype("datetime64[D]")
            if len(sub):
                periods = np.arange(ords.min(), ords.max() + 1, dtype=np.int64)
                releases = np.unique(rel)
            else:
                periods = np.zeros(0, np.int64)
                releases = np.zeros(0, "datetime64[D]")
            raw = np.full((len(releases), len(vars_f), len(periods)), np.nan)
            if len(sub):
                vi = np.searchsorted(vars_f.astype(str), sub["variable"].to_numpy().astype(str))
                raw[np.searchsorted(releases, rel), vi, ords - periods[0]] = sub["value"].to_numpy()
            parts[f] = FreqCube(f, vars_f.astype(str), periods, releases, raw)
        return cls(parts, {v: meta[v] for v in names}, checksum)

    # ------------------------------------------------------------------ descriptors
    @property
    def variables(self) -> list[str]:
        return sorted(self.meta)

    def freq_of(self, variable: str) -> str:
        try:
            return self.meta[variable]["freq"]
        except KeyError:
            raise KeyError(f"unknown variable {variable!r}; known: {self.variables}") from None

    def part(self, variable: str) -> tuple[FreqCube, int]:
        """The frequency cube holding a variable, and the variable's row in it."""
        fc = self.parts[self.freq_of(variable)]
        return fc, int(np.searchsorted(fc.variables, variable))

    @property
    def last_release(self) -> np.datetime64:
        """The latest release date in the store."""
        return max(fc.releases[-1] for fc in self.parts.values() if len(fc.releases))

    @property
    def first_release(self) -> np.datetime64:
        return min(fc.releases[0] for fc in self.parts.values() if len(fc.releases))

    def release_dates(self, variable: str) -> np.ndarray:
        """The days on which the variable had a release (datetime64[D], sorted)."""
        fc, i = self.part(variable)
        return fc.releases[(~np.isnan(fc.raw[:, i, :])).any(axis=1)]

    def to_dataarray(self, freq: str) -> xr.DataArray:
        """The raw cube of one frequency as xarray (variable, period, release); NaN = not published."""
        fc = self.parts[freq]
        return xr.DataArray(np.moveaxis(fc.raw, 0, -1), dims=("variable", "period", "release"),
                            coords={"variable": fc.variables, "period": fc.period_index,
                                    "release": fc.releases.astype("datetime64[ns]")}, name="value")

    # ------------------------------------------------------------------ views
    def asof(self, date) -> Vintage:
        """What was known on ``date``: for each cell, the latest release dated on or before it."""
        d = _as_day(date)
        arrays = {}
        for f, fc in self.parts.items():
            vals, rel = fc.asof_values([d])
            arrays[f] = (fc, vals[0], rel[0])
        return Vintage(d, arrays)

    def estimate(self, k: int, freq: str) -> xr.DataArray:
        """The k-th published estimate of every cell (k = 1 is the first release); NaN if fewer."""
        if k < 1:
            raise ValueError(f"estimate number must be ≥ 1, got {k}")
        fc = self.parts[freq]
        if not len(fc.releases):
            vals, rel = fc.asof_values([np.datetime64("NaT")])
            return fc.to_array(vals[0], rel[0], f"estimate_{k}")
        obs = ~np.isnan(fc.raw)
        hit = obs & (np.cumsum(obs, axis=0) == k)
        has = hit.any(axis=0)
        pos = hit.argmax(axis=0)
        vals = np.take_along_axis(fc.raw, pos[None], axis=0)[0]
        vals[~has] = np.nan
        rel = np.where(has, fc.releases[pos], np.datetime64("NaT"))
        return fc.to_array(vals, rel, f"estimate_{k}")

    def first(self, freq: str) -> xr.DataArray:
        """The first published estimate of every cell."""
        return self.estimate(1, freq)

    def latest(self, freq: str) -> xr.DataArray:
        """The latest published estimate of every cell."""
        fc = self.parts[freq]
        if not len(fc.releases):
            vals, rel = fc.asof_values([np.datetime64("NaT")])
            return fc.to_array(vals[0], rel[0], "latest")
        src = fc.src[-1]
        rel = np.where(src >= 0, fc.releases[np.maximum(src, 0)], np.datetime64("NaT"))
        return fc.to_array(fc.known[-1].copy(), rel, "latest")

    def lagged(self, lag_days: int, freq: str) -> xr.DataArray:
        """For each period, the estimate in force ``lag_days`` after the period ended."""
        fc = self.parts[freq]
        when = period_end(fc.periods, freq) + np.timedelta64(int(lag_days), "D")
        if not len(fc.releases):
            vals, rel = fc.asof_values([np.datetime64("NaT")])
            return fc.to_array(vals[0], rel[0], f"lag_{lag_days}D")
        j = fc.release_index(when)
        pi = np.arange(len(fc.periods))
        vals = fc.known[np.maximum(j, 0)[None, :].repeat(len(fc.variables), 0),
                        np.arange(len(fc.variables))[:, None], pi[None, :]]
        src = fc.src[np.maximum(j, 0)[None, :].repeat(len(fc.variables), 0),
                     np.arange(len(fc.variables))[:, None], pi[None, :]]
        vals = np.where(j[None, :] >= 0, vals, np.nan)
        src = np.where(j[None, :] >= 0, src, -1)
        rel = np.where(src >= 0, fc.releases[np.maximum(src, 0)], np.datetime64("NaT"))
        return fc.to_array(vals, rel, f"lag_{lag_days}D")


__all__ = ["Cube", "FreqCube", "Vintage"]
