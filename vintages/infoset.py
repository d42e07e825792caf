"""Real-time information sets: what a forecaster could see at an origin, and the truths to score.

The two containers below are the contract between :mod:`vintages` and the models in
:mod:`harness.models`; their fields may grow but never change meaning.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import xarray as xr


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
        Per variable, the release date of its last observed value (provenance).
    policy : {"keep", "balance", "realign"}
        Ragged-edge policy that produced ``panel``.
    transforms : dict[str, str]
        Per variable, the transformation applied inside the vintage (e.g. ``"dlog_ann"``).
    partial : xarray.DataArray or None, dims ``(period, variable)``, bool
        True where a quarterly value of a monthly variable rests on fewer than three months.
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
        return s.iloc[lo:hi + 1]

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
        return np.array([(self.current + int(h)).ordinal - last.ordinal for h in self.horizons], dtype=np.int64)
