"""The release index (variable × reference period × release date) and vectorised as-of selection.

One index per frequency: quarterly and monthly variables keep their own period axis. Inside,
every published value is one *row*: the rows are sorted by cell (variable, period) and, within
a cell, by release day, so each cell owns a contiguous run of rows (offsets in ``starts``).
Memory grows with the number of values (about 33 bytes a value), never with release days ×
variables × periods: a panel of 100 monthly indicators over 30 years, each on its own release
days (108,000 values on 11,000 distinct release days), takes 3.3 MB where the dense
release × variable × period array it replaces took about 9 GB.

What was known on a day ``d`` is, per cell, the last row of its run with release day ≤ ``d``.
Two vectorised paths compute it (a property test binds both to a brute-force filter):

* many days × many cells (information sets; :meth:`FreqIndex.asof_src`, ``path="grid"``): one
  ``searchsorted`` of the release days among the sorted days gives, for every row, the first
  day on which it is known; the row is written there on a (day, cell) grid, and a running
  maximum along the days carries it forward until the next row of its cell takes over. Cost:
  one pass over the rows plus two over the grid the caller asked for.
* one day per cell (a single as-of, ``lagged``; :meth:`FreqIndex.asof_cells`,
  ``path="keys"``): one ``searchsorted`` over the combined keys ``cell * BIG + day`` (``BIG``
  wider than the span of days), so a single sorted array answers every (cell, day) question.

Conventions
-----------
* A value released on day ``d`` is known from ``d`` on (``asof(d)`` includes releases dated ``d``).
* The *k*-th estimate of a cell is the value in the *k*-th release that published that cell
  (a re-publication of an unchanged value counts as a release, as in a release triangle).
* A NaN value in a log means "not published" (it is dropped), as in a release triangle.
"""

from __future__ import annotations

import io
import json
import os
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from vintages.errors import StoreCorruptError, UnknownNameError
from vintages.periods import parse_periods, period_end, period_index

_NAT = np.datetime64("NaT", "D")
_FREQ_ORDER = ("Q", "M")
SAVE_FORMAT = "vintage-index/1"


def _as_day(date) -> np.datetime64:
    return np.datetime64(pd.Timestamp(date).date(), "D")


def _days(dates) -> np.ndarray:
    return np.atleast_1d(np.asarray(dates, dtype="datetime64[D]")).ravel()


class FreqIndex:
    """Every published value of the variables of one frequency, as rows sorted by cell and day.

    Parameters
    ----------
    freq : {"Q", "M"}
    variables : ndarray of str, shape (n_var,)
        Sorted variable names.
    periods : ndarray of int64, shape (n_period,)
        Consecutive period ordinals (the period axis shared by the variables).
    cell : ndarray of int64, shape (n_value,)
        ``variable_row * n_period + period_column`` of each value, sorted.
    day : ndarray of datetime64[D], shape (n_value,)
        Release day of each value, sorted within each cell, unique within a cell.
    value : ndarray of float64, shape (n_value,)

    Notes
    -----
    A *source* array (``src``) holds row numbers into ``cell``/``day``/``value``, ``-1`` where
    nothing was known; :meth:`gather` turns it into values and release days. Build an index
    with :meth:`vintages.cube.Cube.from_log`; it pickles as its five arrays (the derived
    offsets are rebuilt on load).
    """

    def __init__(self, freq: str, variables, periods, cell, day, value):
        self.freq = freq
        self.variables = np.asarray(variables, dtype=str)
        self.periods = np.asarray(periods, dtype=np.int64)
        self.cell = np.asarray(cell, dtype=np.int64)
        # Row -1 reads a NaN / NaT sentinel after the last value, so gathering needs no mask.
        self._value_ext = np.append(np.asarray(value, dtype=np.float64), np.nan)
        self._day_ext = np.append(np.asarray(day, dtype="datetime64[D]"), _NAT)
        self.value, self.day = self._value_ext[:-1], self._day_ext[:-1]
        n_cells = len(self.variables) * len(self.periods)
        # starts[c]:starts[c + 1] are the rows of cell c (CSR offsets).
        self.starts = np.zeros(n_cells + 1, dtype=np.int64)
        np.cumsum(np.bincount(self.cell, minlength=n_cells), out=self.starts[1:])
        self.releases = np.unique(self.day)  # the release days of this frequency, sorted
        # each value's release-day number, and where a new cell's run starts (for the as-of)
        self._rel_no = np.searchsorted(self.releases, self.day).astype(np.int32)
        self._new_cell = np.ones(len(self.cell), dtype=bool)
        self._new_cell[1:] = self.cell[1:] != self.cell[:-1]
        self._src_dtype = np.intp  # int32 would halve the grid but slow every gather

    def __reduce__(self):
        return (FreqIndex, (self.freq, self.variables, self.periods, self.cell, self.day, self.value))

    def __repr__(self) -> str:
        return (f"FreqIndex({self.freq!r}, {len(self.variables)} variables, "
                f"{len(self.periods)} periods, {len(self.value)} values, "
                f"{len(self.releases)} release days)")

    # ------------------------------------------------------------------ descriptors
    @property
    def n_period(self) -> int:
        return len(self.periods)

    @property
    def nbytes(self) -> int:
        """Bytes held by the index's arrays."""
        arrays = (self.cell, self._day_ext, self._value_ext, self.starts, self.releases,
                  self.periods, self._rel_no, self._new_cell)
        return int(sum(a.nbytes for a in arrays))

    @cached_property
    def period_index(self) -> pd.PeriodIndex:
        return period_index(self.periods, self.freq)

    def row_of(self, variable: str) -> int:
        """The variable's row (its position in :attr:`variables`)."""
        i = int(np.searchsorted(self.variables, variable))
        if i >= len(self.variables) or self.variables[i] != variable:
            raise KeyError(f"unknown {self.freq} variable {variable!r}; known: {list(self.variables)}")
        return i

    def _rows(self, rows) -> np.ndarray:
        return np.arange(len(self.variables)) if rows is None else np.asarray(rows, dtype=np.int64)

    def _cells(self, rows) -> np.ndarray:
        """Cell numbers (n_rows, n_period) of some variables' rows."""
        return self._rows(rows)[:, None] * self.n_period + np.arange(self.n_period)[None, :]

    def value_rows(self, rows) -> tuple[np.ndarray, np.ndarray]:
        """The value rows of some variables, in their order: (row numbers, local cell numbers).

        The local cell of a value is ``k * n_period + period_column`` with ``k`` the position of
        its variable in ``rows``; both arrays are sorted by local cell, then release day.
        """
        rows = self._rows(rows)
        npd = self.n_period
        lo, hi = self.starts[rows * npd], self.starts[(rows + 1) * npd]
        lens = hi - lo
        total = int(lens.sum())
        before = np.cumsum(lens) - lens
        r = np.arange(total, dtype=np.int64) + np.repeat(lo - before, lens)
        local = self.cell[r] - np.repeat((rows - np.arange(len(rows))) * npd, lens)
        return r, local

    def release_days(self, row: int) -> np.ndarray:
        """The days on which the variable in ``row`` had a release (sorted, unique)."""
        npd = self.n_period
        return np.unique(self.day[self.starts[row * npd]:self.starts[(row + 1) * npd]])

    # ------------------------------------------------------------------ as-of
    def asof_src(self, dates, rows=None, *, path: str = "auto") -> np.ndarray:
        """Source rows in force on each date: int array (n_dates, n_rows, n_period), -1 none.

        The many-dates path (``path="grid"``): each value is written on the first date (among
        ``dates``) it is known, then carried forward by a running maximum until a later value
        of its cell takes over. Work and memory: the values of ``rows`` plus the output grid.
        For a few dates the combined-key path (``path="keys"``, :meth:`asof_cells`) is cheaper;
        ``"auto"`` picks by cost. Both give the same answer (a property test binds them).
        """
        if path not in ("auto", "grid", "keys"):
            raise ValueError(f"unknown as-of path {path!r}; expected one of ['auto', 'grid', 'keys']")
        d = _days(dates)
        all_rows = rows is None
        rows = self._rows(rows)
        nd, npd = len(d), self.n_period
        n_cell = len(rows) * npd
        if not (nd and len(self.value) and n_cell):
            return np.full((nd, len(rows), npd), -1, dtype=self._src_dtype)
        if all_rows:
            r, local, new_cell = None, self.cell, self._new_cell
        else:
            r, local = self.value_rows(rows)
            new_cell = np.ones(len(r), dtype=bool)
            new_cell[1:] = local[1:] != local[:-1]
        # A searchsorted per cell costs ~8 passes over the grid; the grid path one pass over
        # the values plus two over the grid.
        if path == "keys" or (path == "auto" and nd * n_cell * 8 < len(local)):
            src = self.asof_cells(self._cells(rows)[None], d[:, None, None])
            return src.astype(self._src_dtype, copy=False)
        order = None if (nd == 1 or (d[1:] >= d[:-1]).all()) else np.argsort(d, kind="stable")
        ds = d if order is None else d[order]
        # first date index on or after each release day (NaT dates sort last, see below)
        first_date = np.searchsorted(ds, self.releases, side="left").astype(np.int32)
        first = first_date[self._rel_no if r is None else self._rel_no[r]]
        # Several values of a cell first known on the same date: the latest one wins.
        last = np.empty(len(first), dtype=bool)
        last[-1] = True
        last[:-1] = new_cell[1:] | (first[1:] != first[:-1])
        keep = np.flatnonzero(last & (first < nd))
        grid = np.full((nd, n_cell), -1, dtype=self._src_dtype)
        grid.ravel()[first[keep].astype(np.int64) * n_cell + local[keep]] = (
            keep if r is None else r[keep]
        )
        # Within a cell, later release days have larger row numbers: max = latest in force.
        np.maximum.accumulate(grid, axis=0, out=grid)
        grid[np.isnat(ds)] = -1
        if order is not None:
            out = np.empty_like(grid)
            out[order] = grid
            grid = out
        return grid.reshape(nd, len(rows), npd)

    @cached_property
    def _keys(self) -> tuple[np.ndarray, int, int]:
        """Combined sort keys ``cell * BIG + (day - day0 + 1)`` of the values, BIG and day0."""
        if not len(self.value):
            return np.zeros(0, np.int64), 2, 0
        days = self.day.view(np.int64)
        day0 = int(days.min())
        big = int(days.max()) - day0 + 2
        return self.cell * big + (days - day0 + 1), big, day0

    def asof_cells(self, cells, dates) -> np.ndarray:
        """Source row in force in each cell on its own date (arrays broadcast), -1 none.

        The one-date-per-cell path: one ``searchsorted`` over the combined keys.
        """
        cells, d = np.broadcast_arrays(np.asarray(cells, dtype=np.int64),
                                       np.asarray(dates, dtype="datetime64[D]"))
        keys, big, day0 = self._keys
        if not len(keys):
            return np.full(cells.shape, -1, dtype=np.int64)
        nat = np.isnat(d)
        days = np.where(nat, day0, d.view(np.int64))
        off = np.clip(days - day0 + 1, 0, big - 1)  # before all: 0, after all: big - 1
        pos = np.searchsorted(keys, cells * big + off, side="right") - 1
        ok = (pos >= self.starts[cells]) & ~nat
        return np.where(ok, pos, -1)

    def nth_src(self, k: int, rows=None) -> np.ndarray:
        """Source row of each cell's k-th release (k ≥ 1; -1 when fewer): (n_rows, n_period)."""
        c = self._cells(rows)
        lo = self.starts[c]
        return np.where(self.starts[c + 1] - lo >= k, lo + (k - 1), -1)

    def latest_src(self, rows=None) -> np.ndarray:
        """Source row of each cell's latest release (-1 when none): (n_rows, n_period)."""
        c = self._cells(rows)
        hi = self.starts[c + 1]
        return np.where(hi > self.starts[c], hi - 1, -1)

    def gather(self, src: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Values (float64, NaN) and release days (datetime64[D], NaT) of source rows."""
        return self._value_ext[src], self._day_ext[src]

    def asof_values(self, dates, rows=None, *, path: str = "auto") -> tuple[np.ndarray, np.ndarray]:
        """Known values and their release dates at each date: arrays (n_dates, n_rows, n_period)."""
        return self.gather(self.asof_src(dates, rows, path=path))

    # ------------------------------------------------------------------ dense views
    def dense(self, rows=None, releases=None) -> tuple[np.ndarray, np.ndarray]:
        """The values published on each release day: (n_rows, n_period, n_release), NaN = none.

        ``releases`` defaults to the days on which any of the variables had a release.
        """
        r, local = self.value_rows(rows)
        if releases is None:
            rel = np.unique(self.day[r])
        else:
            rel = np.unique(_days(releases))
        out = np.full((len(self._rows(rows)) * self.n_period, len(rel)), np.nan)
        if len(rel) and len(r):
            col = np.searchsorted(rel, self.day[r])
            hit = col < len(rel)
            hit[hit] = rel[col[hit]] == self.day[r][hit]
            out[local[hit], col[hit]] = self.value[r[hit]]
        return out.reshape(len(self._rows(rows)), self.n_period, len(rel)), rel

    def to_array(self, values: np.ndarray, rel: np.ndarray | None, name: str) -> xr.DataArray:
        coords = {"variable": self.variables, "period": self.period_index}
        da = xr.DataArray(values, dims=("variable", "period"), coords=coords, name=name)
        if rel is not None:
            da = da.assign_coords(release_date=(("variable", "period"), rel))
        return da

    # ------------------------------------------------------------------ persistence
    def _arrays(self) -> dict[str, np.ndarray]:
        return {"variables": self.variables, "periods": self.periods, "cell": self.cell,
                "day": self.day.view(np.int64), "value": self.value}


def _consistent(fc: FreqIndex) -> bool:
    """Equal lengths, cells in range, rows sorted by cell then strictly by day within a cell."""
    n = len(fc.variables) * len(fc.periods)
    if not len(fc.cell) == len(fc.day) == len(fc.value):
        return False
    if not len(fc.cell):
        return True
    dc, dd = np.diff(fc.cell), np.diff(fc.day.view(np.int64))
    return bool(fc.cell[0] >= 0 and fc.cell[-1] < n and (dc >= 0).all()
                and ((dc > 0) | (dd > 0)).all() and not np.isnat(fc.day).any())


class Vintage:
    """What was known on one day: per frequency, values (variable, period) and their release dates.

    A light view: the numbers are plain arrays sliced from the index; :attr:`arrays` builds the
    xarray form (a DataArray per frequency with a ``release_date`` coordinate) on first use.
    """

    def __init__(self, date, parts: dict[str, tuple[FreqIndex, np.ndarray, np.ndarray]]):
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
        raise UnknownNameError(f"unknown variable {variable!r}; known: {sorted(self.variables)}")

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
            x = vals.ravel()
            ok = np.flatnonzero(~np.isnan(x))
            if not len(ok):
                continue
            frames.append(pd.DataFrame({
                "variable": fc.variables[ok // npd],
                "period": format_periods(fc.periods[ok % npd], fc.freq),
                "value": x[ok],
                "release": rel.ravel()[ok],
            }))
        if not frames:
            return pd.DataFrame(columns=["variable", "period", "value", "release"])
        return pd.concat(frames, ignore_index=True)


class Cube:
    """Every release of every variable, by frequency, with vectorised as-of and estimate views.

    Build it with :meth:`vintages.store.VintageStore.cube` (or :meth:`from_log` on a table).
    It pickles (a few arrays per frequency) and saves to one ``.npz`` file
    (:meth:`save`, :meth:`load`), so a driver may cache it keyed by :attr:`checksum`.

    Parameters
    ----------
    indexes : dict {"Q", "M"} -> FreqIndex
        The release index of each frequency present.
    meta : dict
        Per-variable metadata (at least ``{"freq": "Q" | "M"}``).
    checksum : str, optional
        The store checksum the cube was built from.
    """

    def __init__(self, indexes: dict[str, FreqIndex], meta: dict[str, dict],
                 checksum: str | None = None):
        self.indexes = indexes
        self.meta = meta
        self.checksum = checksum

    @classmethod
    def from_log(cls, log: pd.DataFrame, meta: dict[str, dict], *, variables=None,
                 checksum: str | None = None) -> Cube:
        """Build from a long table (variable, period, release, value) of values in force.

        Of several rows of one (variable, period, release) the last one counts (as in the
        store's log); rows with a NaN value are not publications.
        """
        names = sorted(meta) if variables is None else sorted(variables)
        unknown = [v for v in names if v not in meta]
        if unknown:
            raise UnknownNameError(f"unknown variable(s) {unknown}; known: {sorted(meta)}")
        log = log[log["variable"].isin(names)]
        codes, uniq = pd.factorize(log["variable"].to_numpy(dtype=object))
        ords = parse_periods(log["period"].to_numpy())[0] if len(log) else np.zeros(0, np.int64)
        rel = log["release"].to_numpy().astype("datetime64[D]")
        val = log["value"].to_numpy(dtype=np.float64)
        indexes: dict[str, FreqIndex] = {}
        for f in _FREQ_ORDER:
            vars_f = np.array([v for v in names if meta[v]["freq"] == f], dtype=str)
            if not len(vars_f):
                continue
            # row of each distinct log variable in this frequency (-1: another frequency)
            row_of = np.array([np.searchsorted(vars_f, u) if meta[u]["freq"] == f else -1
                               for u in uniq], dtype=np.int64)
            vi = row_of[codes] if len(codes) else np.zeros(0, np.int64)
            take = vi >= 0
            vi, o, d, x = vi[take], ords[take], rel[take], val[take]
            periods = (np.arange(o.min(), o.max() + 1, dtype=np.int64) if len(o)
                       else np.zeros(0, np.int64))
            cell = vi * len(periods) + (o - (periods[0] if len(periods) else 0))
            order = np.lexsort((d, cell))  # stable: equal keys keep the log's order
            cell, d, x = cell[order], d[order], x[order]
            last = np.ones(len(cell), dtype=bool)
            last[:-1] = (cell[1:] != cell[:-1]) | (d[1:] != d[:-1])
            keep = last & ~np.isnan(x)
            indexes[f] = FreqIndex(f, vars_f, periods, cell[keep], d[keep], x[keep])
        return cls(indexes, {v: meta[v] for v in names}, checksum)

    # ------------------------------------------------------------------ persistence
    def save(self, path: str | os.PathLike) -> Path:
        """Write the cube to one ``.npz`` file (atomically); :meth:`load` reads it back."""
        from vintages.store import atomic_write_bytes

        p = Path(path)
        header = {"format": SAVE_FORMAT, "meta": self.meta, "checksum": self.checksum,
                  "freqs": list(self.indexes)}
        arrays = {"header": np.array(json.dumps(header, sort_keys=True))}
        for f, fc in self.indexes.items():
            arrays.update({f"{f}.{k}": a for k, a in fc._arrays().items()})
        buf = io.BytesIO()
        np.savez(buf, **arrays)
        atomic_write_bytes(p, buf.getvalue())
        return p

    @classmethod
    def load(cls, path: str | os.PathLike) -> Cube:
        """Read a cube written by :meth:`save`.

        Raises
        ------
        StoreCorruptError
            When the file is not a saved release index or its arrays are inconsistent.
        """
        p = Path(path)
        try:
            with np.load(p, allow_pickle=False) as z:
                header = json.loads(str(z["header"]))
                if header.get("format") != SAVE_FORMAT:
                    raise StoreCorruptError(f"{p}: format {header.get('format')!r}, "
                                            f"expected {SAVE_FORMAT!r}")
                indexes = {}
                for f in header["freqs"]:
                    a = {k: z[f"{f}.{k}"] for k in ("variables", "periods", "cell", "day", "value")}
                    indexes[f] = FreqIndex(f, a["variables"], a["periods"], a["cell"],
                                           a["day"].view("datetime64[D]"), a["value"])
        except StoreCorruptError:
            raise
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise StoreCorruptError(f"{p}: not a saved release index ({exc})") from exc
        for f, fc in indexes.items():
            if not _consistent(fc):
                raise StoreCorruptError(f"{p}: the {f} index arrays are inconsistent "
                                        "(lengths, cell numbers or sort order)")
        return cls(indexes, header["meta"], header["checksum"])

    # ------------------------------------------------------------------ descriptors
    @property
    def variables(self) -> list[str]:
        return sorted(self.meta)

    @property
    def nbytes(self) -> int:
        """Bytes held by the release indexes."""
        return sum(fc.nbytes for fc in self.indexes.values())

    def freq_of(self, variable: str) -> str:
        try:
            return self.meta[variable]["freq"]
        except KeyError:
            raise UnknownNameError(f"unknown variable {variable!r}; known: {self.variables}") from None

    def part(self, variable: str) -> tuple[FreqIndex, int]:
        """The frequency index holding a variable, and the variable's row in it."""
        fc = self.indexes[self.freq_of(variable)]
        return fc, fc.row_of(variable)

    @property
    def last_release(self) -> np.datetime64:
        """The latest release date in the store."""
        return max(fc.releases[-1] for fc in self.indexes.values() if len(fc.releases))

    @property
    def first_release(self) -> np.datetime64:
        return min(fc.releases[0] for fc in self.indexes.values() if len(fc.releases))

    def release_dates(self, variable: str) -> np.ndarray:
        """The days on which the variable had a release (datetime64[D], sorted)."""
        fc, i = self.part(variable)
        return fc.release_days(i)

    def to_dataarray(self, freq: str, *, variables=None, releases=None) -> xr.DataArray:
        """The values of one frequency as published, as xarray (variable, period, release).

        Materialised on request: its size is variables × periods × release days (8 bytes a
        cell), so restrict it on a large store.

        Parameters
        ----------
        freq : {"Q", "M"}
        variables : sequence of str, optional
            Variables of that frequency (default: all of them).
        releases : sequence of date-like, optional
            Release days to show (default: every day on which one of the variables had a
            release). A day without a release is a column of NaN.

        Returns
        -------
        xarray.DataArray
            NaN where nothing was published that day.
        """
        fc = self.indexes[freq]
        if variables is None:
            rows = np.arange(len(fc.variables))
        else:
            names = [variables] if isinstance(variables, str) else list(variables)
            bad = [v for v in names if v not in fc.variables]
            if bad:
                raise KeyError(f"unknown {freq} variable(s) {bad}; known: {list(fc.variables)}")
            rows = np.array([fc.row_of(v) for v in names], dtype=np.int64)
        vals, rel = fc.dense(rows, releases)
        return xr.DataArray(vals, dims=("variable", "period", "release"),
                            coords={"variable": fc.variables[rows], "period": fc.period_index,
                                    "release": rel.astype("datetime64[ns]")}, name="value")

    # ------------------------------------------------------------------ views
    def asof(self, date) -> Vintage:
        """What was known on ``date``: for each cell, the latest release dated on or before it."""
        d = _as_day(date)
        arrays = {}
        for f, fc in self.indexes.items():
            vals, rel = fc.asof_values([d])
            arrays[f] = (fc, vals[0], rel[0])
        return Vintage(d, arrays)

    def estimate(self, k: int, freq: str) -> xr.DataArray:
        """The k-th published estimate of every cell (k = 1 is the first release); NaN if fewer."""
        if k < 1:
            raise ValueError(f"estimate number must be ≥ 1, got {k}")
        fc = self.indexes[freq]
        vals, rel = fc.gather(fc.nth_src(k))
        return fc.to_array(vals, rel, f"estimate_{k}")

    def first(self, freq: str) -> xr.DataArray:
        """The first published estimate of every cell."""
        return self.estimate(1, freq)

    def latest(self, freq: str) -> xr.DataArray:
        """The latest published estimate of every cell."""
        fc = self.indexes[freq]
        vals, rel = fc.gather(fc.latest_src())
        return fc.to_array(vals, rel, "latest")

    def lagged(self, lag_days: int, freq: str) -> xr.DataArray:
        """For each period, the estimate in force ``lag_days`` after the period ended."""
        fc = self.indexes[freq]
        when = period_end(fc.periods, freq) + np.timedelta64(int(lag_days), "D")
        vals, rel = fc.gather(fc.asof_cells(fc._cells(None), when[None, :]))
        return fc.to_array(vals, rel, f"lag_{lag_days}D")


__all__ = ["Cube", "FreqIndex", "Vintage"]
