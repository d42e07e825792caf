"""News decomposition of the revision of a point nowcast or forecast between two origins.

For a linear-Gaussian model the point forecast of a target is a conditional expectation,
linear in the data given the parameters. Between an old and a new information set the change
of the point forecast splits exactly into

1. **revisions**: the effect of the new values of cells published in both sets, at the old
   parameters: ``sum_j w_j (y_j^new - y_j^old)``, with ``w_j`` the weight of cell ``j`` in the
   old-pattern forecast (Koopman & Harvey 2003 observation weights; exact by linearity);
2. **news**: the effect of the cells published only in the new set, at the old parameters:
   ``sum_j b_j (y_j - E[y_j | revised old set])`` (Bańbura & Modugno 2014, sec. 2.4:
   ``E[y | new] - E[y | old] = E[y I'] E[I I']^{-1} I`` with news ``I``; the weights ``b`` are the
   weights of the new cells in the new-pattern forecast, as the identity holds for every value
   of the news);
3. **re-estimation**: the forecast on the new set at the new parameters minus that at the old
   parameters (for the factor model this includes the vintage's new standardisation);
4. a **remainder**: the total change minus the rows above; it holds the effect of cells
   published in the old set but absent from the new one, and rounding (about 1e-12 otherwise).

Models: the dynamic factor model (:class:`harness.models.dfm.DynamicFactorModel`, native
information sets) through its Kalman smoother, and the Bayesian VAR
(:class:`harness.models.bvar.BayesianVAR`, quarterly information sets) through its conditional
forecast (Waggoner & Zha 1999) at the posterior mean parameters ``(B~, E[Sigma | Y])``.

References
----------
Bańbura, M. and Modugno, M. (2014). Maximum likelihood estimation of factor models on datasets
with arbitrary pattern of missing data. *Journal of Applied Econometrics* 29(1), 133-160.
Bańbura, M., Giannone, D., Modugno, M. and Reichlin, L. (2013). Now-casting and the real-time
data flow. In Elliott, G. and Timmermann, A. (eds), *Handbook of Economic Forecasting* 2A,
Elsevier, 195-237.
Koopman, S. J. and Harvey, A. (2003). Computing observation weights for signal extraction and
filtering. *Journal of Economic Dynamics and Control* 27(7), 1317-1333.
Waggoner, D. F. and Zha, T. (1999). Conditional forecasts in dynamic multivariate models.
*Review of Economics and Statistics* 81(4), 639-651.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from vintages import InfoSet

__all__ = ["KINDS", "news_by_variable", "news_decomposition", "news_table", "plot_news"]

#: row kinds of a decomposition, in display order
KINDS = ("news", "revision", "reestimation", "remainder", "total")
COLUMNS = ("variable", "period", "kind", "actual", "expected", "weight", "contribution")


@dataclass
class _Cells:
    """Two vintages on one grid (rows = periods, columns = variables)."""

    old: np.ndarray
    new: np.ndarray
    periods: pd.PeriodIndex
    variables: list[str]

    @property
    def both(self) -> np.ndarray:
        return np.isfinite(self.old) & np.isfinite(self.new)

    @property
    def added(self) -> np.ndarray:
        return np.isfinite(self.new) & ~np.isfinite(self.old)

    @property
    def revised(self) -> np.ndarray:
        return self.both & (self.old != self.new)


def _align(info_old: InfoSet, info_new: InfoSet, last: pd.Period) -> _Cells:
    """Both panels on the union of their periods, extended to ``last``."""
    if info_old.variables != info_new.variables:
        raise ValueError(f"news: the two information sets must hold the same variables in the "
                         f"same order; got {info_old.variables} (origin {info_old.origin}) and "
                         f"{info_new.variables} (origin {info_new.origin})")
    if info_old.freq != info_new.freq:
        raise ValueError(f"news: information sets in different frequencies ({info_old.freq!r} at "
                         f"{info_old.origin}, {info_new.freq!r} at {info_new.origin})")
    if info_new.origin < info_old.origin:
        raise ValueError(f"news: info_new's origin {info_new.origin} is before info_old's "
                         f"{info_old.origin}")
    lo = min(info_old.periods[0], info_new.periods[0])
    hi = max(info_old.periods[-1], info_new.periods[-1], last)
    periods = pd.period_range(lo, hi, freq=info_new.periods.freq)

    def place(info):
        out = np.full((len(periods), len(info.variables)), np.nan)
        r0 = info.periods[0].ordinal - lo.ordinal
        out[r0:r0 + len(info.periods)] = np.ascontiguousarray(info.values())
        return out

    return _Cells(place(info_old), place(info_new), periods, list(info_new.variables))


# ---------------------------------------------------------------------------- model adapters
class _DFMSystem:
    """The factor model at fixed parameters: point forecasts, observation weights, cell means."""

    def __init__(self, fit, cells: _Cells, target_col: int, target_row: int):
        from harness.models.dfm_ssm import system

        self.fit = fit
        self.ss = system(fit.params, fit.layout)
        self.col = target_col
        self.row = target_row
        self.cells = cells

    def _x(self, y: np.ndarray) -> np.ndarray:
        return (y - self.fit.mean) / self.fit.scale

    def weights(self, y: np.ndarray) -> tuple[float, np.ndarray]:
        """Point forecast (target units) and the weight of every cell of ``y`` in it."""
        from harness.models.dfm_fast import filter_fast, observation_weights

        nrow = self._rows(y)
        x = self._x(y[:nrow])
        fo = filter_fast(x, self.ss)
        w = observation_weights(fo, self.row, self.ss.Z[self.col])
        s = self.fit.scale
        point = self.fit.mean[self.col] + s[self.col] * float(np.nansum(w * x))
        full = np.zeros(y.shape)
        full[:nrow] = w * s[self.col] / s[None, :]  # d point / d y (series units)
        return point, full

    def _rows(self, y: np.ndarray, extra: np.ndarray | None = None) -> int:
        """Rows through the target and the last observed (or flagged) cell."""
        has = np.isfinite(y).any(axis=1) if extra is None else np.isfinite(y).any(axis=1) | extra
        last = int(np.flatnonzero(has).max()) if has.any() else 0
        return max(self.row, last) + 1

    def point(self, y: np.ndarray) -> float:
        return self.weights(y)[0]

    def expected(self, y: np.ndarray, cells: np.ndarray) -> np.ndarray:
        """``E[y_cell | y]`` for the flagged cells, in the series' units."""
        from harness.models.dfm_fast import filter_fast, smooth_fast

        nrow = self._rows(y, cells.any(axis=1))
        x = self._x(y[:nrow])
        fo = filter_fast(x, self.ss)
        mean = smooth_fast(fo, self.ss).mean
        t, j = np.nonzero(cells[:nrow])
        sig = np.einsum("tm,tm->t", self.ss.Z[j], mean[t])
        out = np.full(cells.shape, np.nan)
        out[t, j] = self.fit.mean[j] + self.fit.scale[j] * sig
        return out


class _BVARSystem:
    """The BVAR at its posterior mean parameters: the conditional forecast of Waggoner & Zha."""

    def __init__(self, post, anchor: int, target_col: int, target_row: int):
        self.coef = post.coef_mean
        self.cov = post.mean_sigma()
        self.p = post.lags
        self.anchor = anchor
        self.col = target_col
        self.row = target_row

    def _moments(self, y: np.ndarray) -> tuple[np.ndarray, int]:
        from harness.models.conditional import conditional_moments

        s0, p = self.anchor, self.p
        init = y[s0 - p:s0]
        if not np.isfinite(init).all():
            raise ValueError("news: the VAR's conditioning rows are not fully observed")
        steps = max(self.row, int(np.flatnonzero(np.isfinite(y).any(axis=1)).max())) - s0 + 1
        tail = y[s0:s0 + steps]
        tail = tail if np.isfinite(tail).any() else None
        mean, _ = conditional_moments(self.coef, self.cov, init, steps, tail)
        return mean, s0

    def point(self, y: np.ndarray) -> float:
        mean, s0 = self._moments(y)
        return float(mean[self.row - s0, self.col])

    def weights(self, y: np.ndarray) -> tuple[float, np.ndarray]:
        """Point forecast and weights by unit perturbations (exact: the forecast is linear)."""
        base = self.point(y)
        w = np.zeros(y.shape)
        lo = self.anchor - self.p
        for t, j in zip(*np.nonzero(np.isfinite(y[lo:])), strict=True):
            bumped = y.copy()
            bumped[lo + t, j] += 1.0
            w[lo + t, j] = self.point(bumped) - base
        return base, w

    def expected(self, y: np.ndarray, cells: np.ndarray) -> np.ndarray:
        mean, s0 = self._moments(y)
        out = np.full(cells.shape, np.nan)
        for t, j in zip(*np.nonzero(cells), strict=True):
            if s0 <= t < s0 + mean.shape[0]:
                out[t, j] = mean[t - s0, j]
        return out


def _dfm_systems(model, info_old, info_new, target, horizon):
    from harness.models.dfm_native import native_targets

    tg = native_targets(info_new, [target], (horizon,))
    period = tg.current + int(horizon)
    month = period.asfreq("M", how="end")
    cells = _align(info_old, info_new, month)
    fit_old = model.fit(info_old, native_targets(info_old, [target], (0,)))
    fit_new = model.fit(info_new, tg)
    col = cells.variables.index(target)
    row = int(month.ordinal - cells.periods[0].ordinal)
    # each fit's sample starts at its own panel's first month; the grid must start there too
    for info in (info_old, info_new):
        if info.periods[0] != cells.periods[0]:
            raise ValueError(f"news: the information set at {info.origin} starts at "
                             f"{info.periods[0]}, not at the other's {cells.periods[0]}; the "
                             f"factor model's sample must start in the same month")
    return (_DFMSystem(fit_old, cells, col, row), _DFMSystem(fit_new, cells, col, row), cells,
            str(period))


def _bvar_systems(model, info_old, info_new, target, horizon):
    from harness.models.bvar import ragged_split

    period = info_new.current + int(horizon)
    cells = _align(info_old, info_new, period)
    col = cells.variables.index(target)
    row = int(period.ordinal - cells.periods[0].ordinal)
    posts, bounds = [], []
    for y in (cells.old, cells.new):
        start, stop, _ = ragged_split(y)
        posts.append(model.fit_sample(y[start:stop], cells.variables))
        bounds.append((start, stop))
    anchor = min(b[1] for b in bounds)
    p = posts[0].lags
    if anchor - p < max(b[0] for b in bounds):
        raise ValueError(f"news: the balanced samples of the two information sets "
                         f"(origins {info_old.origin}, {info_new.origin}) do not share the "
                         f"{p} rows the VAR conditions on")
    return (_BVARSystem(posts[0], anchor, col, row), _BVARSystem(posts[1], anchor, col, row), cells,
            str(period))


# ---------------------------------------------------------------------------- the decomposition
def news_decomposition(model: Any, info_old: InfoSet, info_new: InfoSet, target: str,
                       horizon: int) -> pd.DataFrame:
    """Split the change of a point forecast between two origins into news, revisions and
    re-estimation (see the module docstring).

    Parameters
    ----------
    model : DynamicFactorModel or BayesianVAR
        The model (unfitted; it is estimated on each information set).
    info_old, info_new : InfoSet
        Two information sets with the same variables, ``info_new`` at the later origin
        (native-frequency sets for the factor model, quarterly ones for the BVAR).
    target : str
        Target variable.
    horizon : int
        Horizon relative to ``info_new``'s origin quarter: the target period is that quarter
        plus ``horizon`` (the same period for both forecasts).

    Returns
    -------
    pandas.DataFrame
        One row per newly published value (``kind="news"``) and per revised value
        (``kind="revision"``), then one row each for ``reestimation``, ``remainder`` and
        ``total``. Columns: ``variable`` (str), ``period`` (str), ``kind`` (categorical, order
        :data:`KINDS`), ``actual``, ``expected`` (float64, the released series' units: news -
        the value and its expectation given the revised old set; revision - the new and the old
        value), ``weight`` (float64, target units per unit of the series) and ``contribution``
        (float64, target units). Contributions and the remainder add up to the total. ``attrs``
        holds the target, its period, both origins, both point forecasts and the model name.

    Raises
    ------
    TypeError
        For a model this decomposition does not cover.
    ValueError
        If the information sets do not line up (variables, frequency, order of origins).

    Examples
    --------
    >>> frame = news_decomposition(DynamicFactorModel(), info_jan, info_feb, "gdp", 0)  # doctest: +SKIP
    >>> print(news_table(frame))  # doctest: +SKIP
    """
    from harness.models.bvar import BayesianVAR
    from harness.models.dfm import DynamicFactorModel

    if isinstance(model, DynamicFactorModel):
        old_sys, new_sys, cells, period = _dfm_systems(model, info_old, info_new, target, horizon)
    elif isinstance(model, BayesianVAR):
        old_sys, new_sys, cells, period = _bvar_systems(model, info_old, info_new, target, horizon)
    else:
        raise TypeError(f"news: no decomposition for model {getattr(model, 'name', model)!r}; "
                        f"supported: ['bvar', 'dfm']")
    both, added, revised = cells.both, cells.added, cells.revised
    kept_old = np.where(both, cells.old, np.nan)  # the old set without cells the new one lacks
    revised_old = np.where(both, cells.new, np.nan)
    f_old = old_sys.point(cells.old)
    f_kept, w_kept = old_sys.weights(kept_old)
    f_rev = old_sys.point(revised_old)
    f_news, w_new = old_sys.weights(cells.new)
    expected = old_sys.expected(revised_old, added) if added.any() else np.full(added.shape, np.nan)
    f_new = new_sys.point(cells.new)
    rows = []
    for t, j in zip(*np.nonzero(added), strict=True):
        w = float(w_new[t, j])
        e = float(expected[t, j])
        contrib = w * (cells.new[t, j] - e) if np.isfinite(e) else 0.0
        rows.append((cells.variables[j], str(cells.periods[t]), "news", float(cells.new[t, j]), e,
                     w, contrib))
    for t, j in zip(*np.nonzero(revised), strict=True):
        w = float(w_kept[t, j])
        rows.append((cells.variables[j], str(cells.periods[t]), "revision", float(cells.new[t, j]),
                     float(cells.old[t, j]), w, w * (cells.new[t, j] - cells.old[t, j])))
    total = f_new - f_old
    reest = f_new - f_news
    parts = sum(r[-1] for r in rows) + reest
    rows.append((target, period, "reestimation", f_new, f_news, np.nan, reest))
    rows.append((target, period, "remainder", np.nan, np.nan, np.nan, total - parts))
    rows.append((target, period, "total", f_new, f_old, np.nan, total))
    frame = pd.DataFrame(rows, columns=list(COLUMNS))
    frame["variable"] = frame["variable"].astype(str)
    frame["period"] = frame["period"].astype(str)
    frame["kind"] = pd.Categorical(frame["kind"], categories=list(KINDS), ordered=True)
    for c in ("actual", "expected", "weight", "contribution"):
        frame[c] = frame[c].astype(np.float64)
    frame.attrs.update({"model": str(getattr(model, "name", type(model).__name__)),
                        "target": target, "period": period, "horizon": int(horizon),
                        "origin_old": str(info_old.origin), "origin_new": str(info_new.origin),
                        "forecast_old": f_old, "forecast_new": f_new,
                        "news_total": f_news - f_rev, "revision_total": f_rev - f_kept,
                        "removed_total": f_kept - f_old})
    return frame


# ---------------------------------------------------------------------------- presentation
def news_by_variable(frame: pd.DataFrame) -> pd.DataFrame:
    """Contributions summed by variable and kind (news, revision), then the model-level rows.

    Returns a frame with columns ``variable``, ``kind``, ``count`` (values) and
    ``contribution``, sorted by kind then by absolute contribution; the re-estimation,
    remainder and total rows come last with ``variable`` set to their kind's label.
    """
    cells = frame[frame["kind"].isin(["news", "revision"])]
    g = (cells.groupby(["variable", "kind"], observed=True)["contribution"]
         .agg(count="size", contribution="sum").reset_index())
    g = g.assign(_abs=g["contribution"].abs()).sort_values(["kind", "_abs"],
                                                           ascending=[True, False])
    tail = frame[frame["kind"].isin(["reestimation", "remainder", "total"])]
    tail = pd.DataFrame({"variable": tail["kind"].astype(str).to_numpy(), "kind": tail["kind"],
                         "count": 1, "contribution": tail["contribution"].to_numpy()})
    out = pd.concat([g.drop(columns="_abs"), tail], ignore_index=True)
    out["count"] = out["count"].astype(np.int64)
    out["kind"] = pd.Categorical(out["kind"].astype(str), categories=list(KINDS), ordered=True)
    return out


def news_table(frame: pd.DataFrame, digits: int = 3) -> str:
    """Plain-text table of :func:`news_by_variable` with a header naming target and origins."""
    a = frame.attrs
    g = news_by_variable(frame)
    head = (f"{a.get('model', '?')}: {a.get('target', '?')} {a.get('period', '')} — forecast "
            f"{a.get('forecast_old', float('nan')):.{digits}f} at {a.get('origin_old', '?')} -> "
            f"{a.get('forecast_new', float('nan')):.{digits}f} at {a.get('origin_new', '?')}")
    width = max([len(str(v)) for v in g["variable"]] + [8])
    lines = [head, f"{'variable':<{width}}  {'kind':<12} {'values':>6} {'contribution':>13}"]
    for v, k, n, c in g[["variable", "kind", "count", "contribution"]].itertuples(index=False):
        lines.append(f"{v:<{width}}  {k!s:<12} {n:>6} {c:>13.{digits}f}")
    return "\n".join(lines)


def plot_news(frame: pd.DataFrame, ax=None):
    """Horizontal bar chart of contributions by variable (news and revisions) and re-estimation.

    Returns the matplotlib Figure (matplotlib is imported only here, on the Agg backend).
    """
    from harness.report.plots import PALETTE, _plt

    plt = _plt()
    g = news_by_variable(frame)
    g = g[g["kind"].astype(str) != "total"]
    labels = [v if k in ("news", "revision") else str(k) for v, k in
              zip(g["variable"], g["kind"].astype(str), strict=True)]
    labels = [f"{lab} ({k})" if k in ("news", "revision") else lab
              for lab, k in zip(labels, g["kind"].astype(str), strict=True)]
    colours = {"news": PALETTE[0], "revision": PALETTE[1], "reestimation": PALETTE[2],
               "remainder": PALETTE[6]}
    if ax is None:
        fig, ax = plt.subplots(figsize=(6.4, 0.35 * len(g) + 1.2))
    else:
        fig = ax.figure
    y = np.arange(len(g))[::-1]
    ax.barh(y, g["contribution"].to_numpy(), color=[colours[str(k)] for k in g["kind"]])
    ax.set_yticks(y, labels)
    ax.axvline(0.0, color="black", linewidth=0.8)
    a = frame.attrs
    ax.set_xlabel(f"contribution to the revision of {a.get('target', '')} {a.get('period', '')}")
    ax.set_title(f"total {a.get('forecast_new', np.nan) - a.get('forecast_old', np.nan):+.3f}")
    fig.tight_layout()
    return fig
