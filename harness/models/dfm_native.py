"""Native-frequency information sets for nowcasting models: the target layout and a test builder.

A native-frequency information set (``InfoSet.freq == "M"``) keeps monthly indicators monthly
on one monthly period axis; a quarterly variable sits at its quarter's last month (NaN in the
other two) and ``info.native_freq`` says which is which. Targets stay quarterly
(``Targets(freq="Q", current=<origin's quarter>)``): horizon ``h`` targets quarter
``current + h``, i.e. the panel month that is that quarter's last month.

:class:`NativeLayout` is the native twin of :class:`harness.models.base.TargetLayout` (which
assumes one frequency for panel and targets): it validates the call and locates every target
month. It offers the attributes :func:`harness.models.base.output_array` reads, so models fill
published targets and wrap their draws the same way. A model that wants this form declares the
class attribute ``infoset_layout = "native"`` (the runner builds the native form for it).

:func:`make_native_infoset` builds a synthetic native information set from arrays (for tests and
examples; the invented Veldmark economy).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from harness.models.errors import InsufficientDataError
from vintages import InfoSet, Targets

__all__ = ["NativeLayout", "make_native_infoset", "native_targets", "simulated_native_panel"]


def make_native_infoset(monthly: np.ndarray, quarterly: np.ndarray,
                        monthly_names: list[str] | tuple[str, ...],
                        quarterly_names: list[str] | tuple[str, ...], start: str = "1990-01",
                        origin: Any = None) -> InfoSet:
    """A synthetic native-frequency information set.

    Parameters
    ----------
    monthly : array-like (T, k_M)
        Monthly indicators, rows are consecutive months from ``start`` (NaN = unpublished).
    quarterly : array-like (T, k_Q) or (T // 3, k_Q)
        Quarterly variables, either already on the monthly axis (values at each quarter's last
        month, NaN elsewhere) or one row per quarter (then placed at the quarters' last months;
        ``start`` must then be a quarter's first month).
    monthly_names, quarterly_names : sequence of str
    start : str
        First month.
    origin : date-like, optional
        Default: the first day of the month two months after the last row (so that the panel
        ends before the origin's month, as published data do).

    Returns
    -------
    InfoSet
        ``freq="M"``, ``current`` the origin's month, ``native_freq`` filled in.
    """
    xm = np.asarray(monthly, dtype=np.float64).reshape(len(monthly), -1)
    xq = np.asarray(quarterly, dtype=np.float64).reshape(len(quarterly), -1)
    t = xm.shape[0]
    periods = pd.period_range(start=start, periods=t, freq="M")
    if xq.shape[0] != t:
        if periods[0].month % 3 != 1:
            raise ValueError(f"make_native_infoset: quarterly rows need a 'start' at a quarter's "
                             f"first month, got {start}")
        q = np.full((t, xq.shape[1]), np.nan)
        rows = 3 * np.arange(xq.shape[0]) + 2
        keep = rows < t
        q[rows[keep]] = xq[keep]
        xq = q
    names = [str(v) for v in (*monthly_names, *quarterly_names)]
    if len(names) != xm.shape[1] + xq.shape[1]:
        raise ValueError(f"make_native_infoset: {len(names)} names for "
                         f"{xm.shape[1] + xq.shape[1]} columns")
    x = np.concatenate([xm, xq], axis=1)
    if origin is None:
        current = periods[-1] + 2
        origin_day = np.datetime64(current.start_time.date(), "D")
    else:
        origin_day = np.datetime64(pd.Timestamp(origin).date(), "D")
        current = pd.Period(pd.Timestamp(origin_day), freq="M")
    panel = xr.DataArray(x, dims=("period", "variable"),
                         coords={"period": periods, "variable": names})
    freq = {v: "M" for v in monthly_names} | {v: "Q" for v in quarterly_names}
    last, native_last, src = {}, {}, {}
    for j, v in enumerate(names):
        ok = np.flatnonzero(np.isfinite(x[:, j]))
        if len(ok):
            last[v] = periods[ok[-1]]
            native_last[v] = periods[ok[-1]] if freq[v] == "M" else periods[ok[-1]].asfreq("Q")
            src[v] = origin_day
    return InfoSet(origin=origin_day, freq="M", panel=panel, current=current, last_observed=last,
                   source_release=src, policy="keep", transforms={v: "none" for v in names},
                   native_last=native_last, native_freq={str(k): f for k, f in freq.items()})


def simulated_native_panel(n_months: int = 360, n_monthly: int = 20, seed: int = 0,
                           ragged: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """An invented Veldmark panel: monthly indicators and quarterly output growth, one factor.

    The factor follows ``f_t = 0.6 f_{t-1} + 0.2 f_{t-2} + u_t``; indicator ``i`` is
    ``c_i + lambda_i f_t + e_it`` with AR(1) ``e_it`` (``rho_i`` in [-0.2, 0.7]); quarterly output
    growth is the Mariano-Murasawa aggregate of ``0.5 f_t + e^Q_t`` plus 1, observed at each
    quarter's last month. With ``ragged``, indicator ``i`` ends ``i mod 3`` months early and the
    last quarter of output is unpublished (a ragged edge).

    Returns
    -------
    monthly : ndarray (n_months, n_monthly)
    quarterly : ndarray (n_months, 1)
        NaN except at quarters' last months (the panel starts at a quarter's first month).
    """
    rng = np.random.default_rng(seed)
    t = n_months
    f = np.zeros(t + 24)
    u = rng.standard_normal(t + 24)
    for s in range(2, t + 24):
        f[s] = 0.6 * f[s - 1] + 0.2 * f[s - 2] + u[s]
    f = f[24:]
    lam = rng.uniform(0.3, 1.0, n_monthly)
    rho = rng.uniform(-0.2, 0.7, n_monthly)
    e = np.zeros((t, n_monthly))
    eps = rng.standard_normal((t, n_monthly)) * 0.8
    for s in range(1, t):
        e[s] = rho * e[s - 1] + eps[s]
    monthly = f[:, None] * lam + e + rng.uniform(-1, 1, n_monthly)
    eq = np.zeros(t)
    epq = 0.3 * rng.standard_normal(t)
    for s in range(1, t):
        eq[s] = 0.3 * eq[s - 1] + epq[s]
    latent = 0.5 * f + eq
    quarterly = np.full((t, 1), np.nan)
    for s in range(4, t):
        if s % 3 == 2:
            quarterly[s, 0] = latent[s] + 2 * latent[s - 1] + 3 * latent[s - 2] + 2 * latent[s - 3] \
                + latent[s - 4] + 1.0
    if ragged:
        for i in range(n_monthly):
            if i % 3:
                monthly[t - (i % 3):, i] = np.nan
        quarterly[t - 3:] = np.nan
    return monthly, quarterly


def native_targets(info: InfoSet, variables: list[str] | tuple[str, ...],
                   horizons: tuple[int, ...] = (-1, 0, 1)) -> Targets:
    """Quarterly targets for a native information set: horizon 0 is the origin's quarter."""
    current = pd.Period(pd.Timestamp(info.origin), freq="Q")
    return Targets(variables=tuple(variables), horizons=tuple(int(h) for h in horizons), freq="Q",
                   current=current)


@dataclass(frozen=True)
class NativeLayout:
    """Where each quarterly target sits on the monthly axis, validated once per forecast call.

    Attributes
    ----------
    variables : list of str
        Panel columns.
    values : ndarray (T, n)
        The panel up to its last month with any value (trailing all-NaN months dropped: they
        carry no information).
    periods : pandas.PeriodIndex
        Months of ``values``' rows.
    quarterly : ndarray (n,) bool
        Native frequency of each column.
    columns : ndarray (n_targets,)
        Column of each target variable.
    target_rows : ndarray (n_targets, n_horizons)
        Row (month index from the first panel month) of each target: its quarter's last month;
        may lie beyond ``values`` (a forecast).
    observed, observed_values : ndarray (n_targets, n_horizons)
        Published targets and their values.
    """

    variables: list[str]
    values: np.ndarray
    periods: pd.PeriodIndex
    quarterly: np.ndarray
    targets: Targets
    columns: np.ndarray
    target_rows: np.ndarray
    observed: np.ndarray
    observed_values: np.ndarray
    n_draws: int
    model: str
    origin: Any

    @classmethod
    def build(cls, model: str, info: InfoSet, targets: Targets, n_draws: int,
              rng: np.random.Generator, *, min_months: int = 24) -> NativeLayout:
        """Validate the call; errors name the model, the variable and the origin.

        Raises
        ------
        InsufficientDataError
            Fewer than ``min_months`` months with any observation.
        ValueError
            A quarterly-only information set, monthly targets, a target that is not quarterly
            or not in the panel, a target quarter before the panel starts.
        """
        if not isinstance(rng, np.random.Generator):
            raise TypeError(f"model {model!r}: rng must be a numpy.random.Generator, "
                            f"got {type(rng).__name__}")
        if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
            raise ValueError(f"model {model!r}: n_draws must be an integer >= 1, got {n_draws!r}")
        origin = info.origin
        values = info.values()
        part = getattr(info, "partial", None)
        if part is not None:
            # the one rule of every layout: a cell flagged partial is not a published value
            # (see harness.models.base, "Partial quarters are left out")
            flags = np.asarray(part.transpose("period", "variable").values, dtype=bool)
            values = np.where(flags, np.nan, values)
        has = np.flatnonzero(np.isfinite(values).any(axis=1))
        n_months = int(has[-1] - has[0] + 1) if len(has) else 0
        if n_months < min_months:
            raise InsufficientDataError(
                f"model {model!r}: the information set at origin {origin} spans {n_months} "
                f"month(s) with data; at least {min_months} are needed")
        first_target = targets.variables[0] if targets.variables else "?"
        if info.freq != "M":
            raise ValueError(
                f"model {model!r} needs a native-frequency information set (monthly axis; the "
                f"model declares infoset_layout='native'); got a {info.freq!r}-frequency panel "
                f"for variable {first_target!r} at origin {origin}")
        if targets.freq != "Q":
            raise ValueError(f"model {model!r}: targets must be quarterly (freq 'Q'); got "
                             f"{targets.freq!r} for variable {first_target!r} at origin {origin}")
        variables = info.variables
        missing = sorted(set(targets.variables) - set(variables))
        if missing:
            raise ValueError(f"model {model!r}: target variable(s) {missing} are not in the "
                             f"information set at origin {origin}; available: {sorted(variables)}")
        native = getattr(info, "native_freq", None) or {}
        quarterly = np.array([native.get(v, "M") == "Q" for v in variables])
        monthly_targets = [v for v in targets.variables if not quarterly[variables.index(v)]]
        if monthly_targets:
            raise ValueError(f"model {model!r}: target variable {monthly_targets[0]!r} is monthly "
                             f"at origin {origin}; the model forecasts quarterly targets from "
                             f"monthly indicators")
        if len(targets.horizons) == 0:
            raise ValueError(f"model {model!r}: targets need at least one horizon")
        periods = info.periods
        if len(periods) > 1 and not np.all(np.diff(periods.asi8) == 1):
            raise ValueError(f"model {model!r}: the panel's months must be consecutive at origin "
                             f"{origin}")
        stop = int(has[-1]) + 1
        # one memory layout whatever the panel's: reductions then round identically
        values = np.ascontiguousarray(values[:stop])
        periods = periods[:stop]
        current = targets.current
        current = current.asfreq("Q") if current.freqstr[0] != "Q" else current
        first = periods[0].ordinal
        rows = np.array([(current + int(h)).asfreq("M", how="end").ordinal - first
                         for h in targets.horizons], dtype=np.int64)
        columns = np.array([variables.index(v) for v in targets.variables], dtype=np.int64)
        target_rows = np.broadcast_to(rows, (len(columns), len(rows))).copy()
        if (target_rows < 0).any():
            k = int(np.flatnonzero(rows < 0)[0])
            raise ValueError(f"model {model!r}: target {targets.variables[0]!r} at "
                             f"{current + int(targets.horizons[k])} lies before the panel starts "
                             f"({periods[0]}) at origin {origin}")
        inside = target_rows < stop
        obs_vals = np.full(target_rows.shape, np.nan)
        jj, kk = np.nonzero(inside)
        obs_vals[jj, kk] = values[target_rows[jj, kk], columns[jj]]
        observed = np.isfinite(obs_vals)
        return cls(variables, values, periods, quarterly, targets, columns, target_rows, observed,
                   obs_vals, int(n_draws), model, origin)


def native_check_case(model, case_id: str = "native", *, n_months: int = 150, n_monthly: int = 6,
                      seed: int = 3):
    """A conformance-suite case on a small simulated native panel (targets at h = -2 … 4, h = -2 published).

    The deterministic-trend law is skipped (``exact_path=None``): a factor model standardises and
    shrinks towards the mean, so a noise-free line is not its exact forecast.
    """
    from harness.models.contract import CheckCase

    mon, q = simulated_native_panel(n_months, n_monthly, seed)
    names = [f"ind{i}" for i in range(n_monthly)]
    info = make_native_infoset(mon, q, names, ["gdp"], start="1995-01")
    return CheckCase(case_id, model, info=info, targets=native_targets(info, ["gdp"], (-2, -1, 0, 1, 4)),
                     exact_path=None, reason="native panel: monthly indicators and a quarterly target")
