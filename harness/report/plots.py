"""The report's figures (matplotlib, Agg backend, imported lazily): PNG bytes to embed and save.

Every figure reads in grey print and for colour-blind readers: the Okabe–Ito palette, one line
style and marker per model, recessions as light grey bands, bands in greys of distinct lightness.
Panels that are compared share their axes. Figures are few and small, laid out with fixed
margins (no layout solver) and few ticks: drawing is the report's main cost.

References
----------
Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*Fly Data Depository for Drosophila
Researchers (web publication).
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd

from harness.report.labels import h_label

# Okabe & Ito (2008) palette (without yellow, too light on white).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#000000")
LINESTYLES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 1)), (0, (8, 2)))
MARKERS = ("o", "s", "^", "D", "v", "P", "X")
DPI = 110
#: width of a figure that fills the printed A4 page's text column (inches)
PAGE_WIDTH = 7.2
#: predictive quantile levels of the bands: 5–95 % and 25–75 % around the median
LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
BAND_OUTER, BAND_INNER = "0.84", "0.64"
OUTCOME_STYLE = dict(marker="D", mfc="#D55E00", mec="black", color="#D55E00", ms=3.8, ls="none", mew=0.5,
                     zorder=5)
FIRST_STYLE = dict(marker="o", mfc="white", mec="black", color="black", ms=3.2, ls="none", mew=0.6, zorder=4)


_RC = {"font.size": 8, "axes.titlesize": 8.5, "axes.labelsize": 8, "xtick.labelsize": 7, "ytick.labelsize": 7,
       "legend.fontsize": 7.5, "path.simplify": True, "axes.linewidth": 0.6, "figure.dpi": DPI}


def _plt():
    """matplotlib.pyplot on the Agg backend (imported only when a figure is drawn)."""
    import matplotlib

    if matplotlib.get_backend().lower() != "agg":
        matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    if any(plt.rcParams[k] != v for k, v in _RC.items()):
        plt.rcParams.update(_RC)
    return plt


def mpl_text(text) -> str:
    """Text safe for matplotlib: ``$`` would start mathtext, so it is escaped."""
    return str(text).replace("\\", "\\\\").replace("$", r"\$")


def style(i: int) -> dict:
    """Colour, line style and marker of the i-th model."""
    return {"color": PALETTE[i % len(PALETTE)], "linestyle": LINESTYLES[i % len(LINESTYLES)],
            "marker": MARKERS[i % len(MARKERS)]}


def to_png(fig) -> bytes:
    """Render and close a figure; return the PNG bytes."""
    plt = _plt()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()


def decimal_year(times) -> np.ndarray:
    """Timestamps as decimal years (a plain numeric axis draws far faster than a date axis)."""
    t = pd.DatetimeIndex(times)
    days = np.where(t.is_leap_year, 366.0, 365.0)
    return np.asarray(t.year + (t.day_of_year - 1 + t.hour / 24.0) / days, dtype=np.float64)


_PERIOD_TIMES: dict[tuple[str, str], float] = {}


def period_times(labels, freq: str = "Q") -> np.ndarray:
    """Mid-period positions of period labels, in decimal years (memoised: the figures ask often)."""
    labels = [str(x) for x in labels]
    new = sorted({x for x in labels if (x, freq) not in _PERIOD_TIMES})
    if new:
        p = pd.PeriodIndex(new, freq=freq)
        for x, t in zip(new, decimal_year(p.start_time + (p.end_time - p.start_time) / 2), strict=True):
            _PERIOD_TIMES[(x, freq)] = float(t)
    return np.array([_PERIOD_TIMES[(x, freq)] for x in labels], dtype=np.float64)


def _layout(fig, *, left=0.6, right=0.15, top=0.7, bottom=0.45, wspace=0.08, hspace=0.35) -> None:
    """Margins in inches (fixed room for labels and the legend); cheaper than a layout solver."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=left / w, right=1 - right / w, top=1 - top / h, bottom=bottom / h,
                        wspace=wspace, hspace=hspace)


def _year_ticks(ax, lo: float, hi: float, max_ticks: int = 6) -> None:
    """Whole years as fixed ticks (no locator search at draw time)."""
    span = max(hi - lo, 1.0)
    step = max(1, int(np.ceil(span / max_ticks)))
    first = int(np.ceil(lo))
    ticks = list(range(first + (-first) % step, int(np.floor(hi)) + 1, step)) or [first]
    ax.set_xticks(ticks)
    ax.set_xticklabels([str(t) for t in ticks])


def recession_spans(regimes: pd.Series | None) -> list[tuple[float, float]]:
    """Start and end (decimal years) of runs of consecutive ``"recession"`` periods."""
    if regimes is None or not len(regimes):
        return []
    r = regimes.sort_index()
    rec = (r.astype(str) == "recession").to_numpy()
    if not rec.any():
        return []
    idx = r.index
    edges = np.diff(np.concatenate([[0], rec.astype(int), [0]]))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    lo = decimal_year([idx[a].start_time for a in starts])
    hi = decimal_year([(idx[b] + 1).start_time for b in ends])
    return list(zip(lo.tolist(), hi.tolist(), strict=True))


def _shade(ax, spans, xlim=None) -> None:
    """Shade recession spans (only those inside ``xlim``, which is then kept)."""
    for a, b in spans:
        if xlim is not None and (b < xlim[0] or a > xlim[1]):
            continue
        ax.axvspan(a, b, color="0.9", zorder=0.3, lw=0)
    if xlim is not None:
        ax.set_xlim(*xlim)


def _xlim(t) -> tuple[float, float] | None:
    t = np.asarray(t, dtype=float)
    t = t[np.isfinite(t)]
    if not len(t):
        return None
    pad = max(0.02 * (t.max() - t.min()), 0.15)
    return float(t.min() - pad), float(t.max() + pad)


def _quantiles(draws: np.ndarray, levels=LEVELS) -> np.ndarray:
    """Quantiles over the last axis, NaN where the draws are missing (a failed task).

    A forecast's draws are all present or all missing, so the complete rows take numpy's
    vectorised quantile (on the draws' own float32: half the memory to partition); only a row
    with some missing draws (never written by the runner) falls back to the NaN-aware path.
    """
    x = np.asarray(draws)
    if x.dtype not in (np.float32, np.float64):
        x = x.astype(np.float64)
    lead, m = x.shape[:-1], x.shape[-1]
    flat = x.reshape(-1, m)
    out = np.full((len(levels), flat.shape[0]), np.nan)
    nan = np.isnan(flat)
    full = ~nan.any(axis=1)
    if full.any():
        out[:, full] = np.quantile(flat[full], levels, axis=-1)
    part = nan.any(axis=1) & ~nan.all(axis=1)
    if part.any():
        out[:, part] = np.nanquantile(flat[part].astype(np.float64), levels, axis=-1)
    return out.reshape((len(levels), *lead))


_QCACHE: dict = {}


def ledger_quantiles(ledger, variable: str, horizons) -> np.ndarray:
    """Quantiles (:data:`LEVELS`) of one variable's draws at every origin: (level, model, origin, horizon).

    Memoised per ledger, variable and horizon (the fan chart, past bands and nowcast path ask
    for the same ones); the cache holds the draws it was computed from and is emptied when
    another ledger comes.
    """
    d = ledger.draws
    if _QCACHE.get("draws") is not d:
        _QCACHE.clear()
        _QCACHE["draws"] = d
    hs = [int(h) for h in d["horizon"].values]
    todo = [h for h in horizons if (variable, int(h)) not in _QCACHE]
    if todo:
        idx = [hs.index(int(h)) for h in todo]
        q = _quantiles(d.sel(variable=variable).isel(horizon=idx).transpose("model", "origin", "horizon",
                                                                            "draw").values)
        for k, h in enumerate(todo):
            _QCACHE[(variable, int(h))] = q[..., k]
    return np.stack([_QCACHE[(variable, int(h))] for h in horizons], axis=-1)


def fan_quantiles(ledger, variable, origins, levels=LEVELS) -> np.ndarray:
    """Predictive quantiles from the ledger's draws: array (level, model, origin, horizon)."""
    d = ledger.draws.sel(variable=variable, origin=origins).transpose("model", "origin", "horizon", "draw").values
    return _quantiles(d, levels)


def fan_horizons(horizons) -> list[int]:
    """The nowcast, one quarter ahead and the longest horizon (those present)."""
    hs = sorted(int(h) for h in horizons)
    pick = [h for h in (0, 1) if h in hs]
    if hs and hs[-1] not in pick:
        pick.append(hs[-1])
    return pick or hs[:1]


def _models(ledger, models=None, benchmark=None) -> list[str]:
    all_models = [str(m) for m in ledger.draws["model"].values]
    ms = [m for m in (models or all_models) if m in all_models]
    if benchmark in ms:
        ms = [benchmark] + [m for m in ms if m != benchmark]
    return ms


def _legend(fig, handles, labels, y_in: float = 0.42, ncol: int = 6) -> None:
    fig.legend(handles, labels, loc="upper center", ncol=max(1, min(len(labels), ncol)), frameon=False,
               bbox_to_anchor=(0.5, 1 - y_in / fig.get_size_inches()[1]), handlelength=1.8, columnspacing=1.2)


def suptitle(fig, text: str, *, size: float = 8.5, top_in: float = 0.06) -> float:
    """A figure title wrapped to the figure's width; returns the inches it takes (for the top margin)."""
    import textwrap

    w, h = fig.get_size_inches()
    per_line = max(20, int(w * 72 / (size * 0.56)))
    lines = textwrap.wrap(text, per_line) or [""]
    fig.text(0.5, 1 - top_in / h, mpl_text("\n".join(lines)), ha="center", va="top", fontsize=size)
    return top_in + len(lines) * size * 1.3 / 72


def _robust_range(values, lo_q: float = 0.5, hi_q: float = 99.5, pad: float = 0.08) -> tuple[float, float]:
    """The range holding all but the most extreme values (percentiles), padded."""
    v = np.concatenate([np.ravel(np.asarray(x, dtype=float)) for x in values if np.size(x)]) if values else []
    v = np.asarray(v)[np.isfinite(v)] if len(v) else np.zeros(1)
    if not len(v):
        v = np.zeros(1)
    lo, hi = np.percentile(v, [lo_q, hi_q])
    if hi <= lo:
        lo, hi = lo - 1.0, hi + 1.0
    d = pad * (hi - lo)
    return float(lo - d), float(hi + d)


def _year_tick_values(lo: float, hi: float, max_ticks: int = 5) -> list[int]:
    step = max(1, int(np.ceil(max(hi - lo, 1.0) / max_ticks)))
    first = int(np.ceil(lo))
    return list(range(first + (-first) % step, int(np.floor(hi)) + 1, step)) or [first]


def _grid_shade(g, r, c, spans) -> None:
    for a, b in spans:
        g.vspan(r, c, a, b, color="0.9", lw=0, zorder=0.3)


def _legend_handles(grid):
    return grid.ax.get_legend_handles_labels()


# ----------------------------------------------------------------------------- pack: the fan chart
def fan_chart_figure(ledger, variables, history: dict, outcomes: dict, *, models=None, benchmark=None,
                     regimes=None, n_history: int = 12, units: dict | None = None) -> bytes | None:
    """The fan chart from the latest origin: bands by horizon for each model on a shared axis.

    One row per target variable, one panel per model; the panels of a row share their y axis,
    so the widths of the bands compare across models. Each panel shows the history as published
    at the origin (the last ``n_history`` periods), the predictive 5–95 % and 25–75 % bands and
    the median at every horizon, and the outcomes published since (markers).

    Parameters
    ----------
    ledger : harness.backtest.Ledger
    variables : sequence of str
    history : dict
        Variable → Series of values known at the latest origin, indexed by period label.
    outcomes : dict
        Variable → Series of outcomes (e.g. the latest vintage), indexed by period label; only
        periods after the last one in ``history`` are drawn.
    units : dict, optional
        Variable → axis label (e.g. the transformation).
    """
    from harness.report.panels import Grid, nice_ticks

    d = ledger.draws
    have = [str(v) for v in d["variable"].values]
    variables = [v for v in variables if v in have]
    if not variables:
        return None
    plt = _plt()
    origin = pd.Timestamp(d["origin"].values[-1])
    t_origin = float(decimal_year([origin])[0])
    ms = _models(ledger, models, benchmark)
    mi = [[str(m) for m in d["model"].values].index(m) for m in ms]
    tp = [str(x) for x in ledger.target_period.values[-1]]
    t_tp = period_times(tp)
    hs = d["horizon"].values
    nrow, ncol = len(variables), len(ms)
    # the chart has a printed page of its own: rows as tall as the page allows
    per_row = 3.2 if nrow <= 2 else 2.4 if nrow == 3 else 1.9
    fig = plt.figure(figsize=(PAGE_WIDTH, min(9.0, per_row * nrow + 1.0)))
    top = suptitle(fig, f"Forecasts made at {origin.date()} (dashed line), {h_label(hs[0])} to {h_label(hs[-1])}; "
                   "the panels of a row share their y axis")
    rows, ylims, xl = [], [], None
    for v in variables:
        q = _quantiles(d.sel(variable=v).isel(origin=-1).transpose("model", "horizon", "draw").values)
        hist = history.get(v, pd.Series(dtype=float)).dropna()
        hist = hist.iloc[-n_history:] if len(hist) else hist
        t_hist = period_times(hist.index) if len(hist) else np.zeros(0)
        out = outcomes.get(v, pd.Series(dtype=float)).dropna()
        if len(out):
            # outcomes published since the origin: periods after the history's last one, up to the
            # longest horizon's target
            p_out = pd.PeriodIndex([pd.Period(str(p)) for p in out.index])
            start = pd.Period(str(hist.index[-1])) if len(hist) else pd.Period(tp[0]) - 1
            out = out[np.asarray((p_out > start) & (p_out <= pd.Period(tp[-1])), dtype=bool)]
        t_out = period_times(out.index) if len(out) else np.zeros(0)
        ylims.append(_robust_range([q[[0, -1]][:, mi], hist.to_numpy(dtype=float), out.to_numpy(dtype=float)],
                                   0, 100, 0.06))
        lo = min(float(t_hist.min()) if len(t_hist) else float(t_tp[0]), float(t_tp[0])) - 0.2
        xl = (lo, float(t_tp[-1]) + 0.2) if xl is None else (min(xl[0], lo), xl[1])
        rows.append((v, q, hist, t_hist, out, t_out))
    g = Grid(fig, nrow, ncol, xlims=xl, ylims=ylims, margins=(0.72, 0.3, 0.1, top + 0.5), gap_x=0.05,
             gap_y=0.2)
    spans = recession_spans(regimes)
    for i, (v, q, hist, t_hist, out, t_out) in enumerate(rows):
        for j, (m, k) in enumerate(zip(ms, mi, strict=True)):
            first = i == 0 and j == 0
            _grid_shade(g, i, j, spans)
            g.fill_between(i, j, t_tp, q[0, k], q[-1, k], color=BAND_OUTER, lw=0, zorder=1,
                           label="5–95%" if first else None)
            g.fill_between(i, j, t_tp, q[1, k], q[3, k], color=BAND_INNER, lw=0, zorder=1.1,
                           label="25–75%" if first else None)
            g.plot(i, j, t_tp, q[2, k], color=style(j)["color"], lw=1.4, zorder=3, label="median" if first else None)
            if len(hist):
                g.plot(i, j, t_hist, hist.to_numpy(dtype=float), color="black", lw=1.1, zorder=3,
                       label="history as published at the origin" if first else None)
            if len(out):
                g.plot(i, j, t_out, out.to_numpy(dtype=float), **OUTCOME_STYLE,
                       label="outcome published since" if first else None)
            g.vline(i, j, t_origin, color="0.25", lw=0.7, ls=(0, (3, 2)), zorder=2)
            if i == 0:
                g.title(i, j, mpl_text(m))
        g.yticks(i, nice_ticks(*ylims[i]), grid=True)
        g.row_label(i, mpl_text(v + (f"\n{units[v]}" if units and v in units else "")), offset_in=0.5)
    g.frames()
    for j in range(ncol):
        g.xticks(j, _year_tick_values(*xl, max_ticks=3 if ncol <= 4 else 2), None)
    handles, labels = _legend_handles(g)
    if not any(lab == "outcome published since" for lab in labels):
        from matplotlib.lines import Line2D

        handles.append(Line2D([], [], **OUTCOME_STYLE))
        labels.append("outcome published since (none yet)")
    _legend(fig, handles, labels, y_in=top + 0.02)
    return to_png(fig)


# ----------------------------------------------------------------------------- appendix: past bands
def past_bands_figure(ledger, variables, outcomes: dict, *, horizons, models=None, benchmark=None,
                      regimes=None, truth: str = "first") -> bytes | None:
    """Past predictive bands against outcomes: every origin's band at its target period, shared axes.

    One row per variable × model, one column per horizon; all panels share the x axis and the
    panels of a variable share the y axis, so bands compare across models and horizons. The y
    axis of a variable holds all but the 0.5 % most extreme band edges and outcomes; an outcome
    beyond it is drawn as a triangle at the edge and counted in the legend.

    Parameters
    ----------
    ledger : harness.backtest.Ledger
    variables : sequence of str
    outcomes : dict
        Variable → Series of outcomes indexed by target period label (the evaluation's truth).
    horizons : sequence of int
    """
    from harness.report.panels import Grid, nice_ticks

    d = ledger.draws
    if isinstance(variables, str):
        variables, outcomes = [variables], {variables: outcomes}
    variables = [v for v in variables if v in [str(x) for x in d["variable"].values]]
    hs = [h for h in horizons if h in [int(x) for x in d["horizon"].values]]
    if not hs or not variables:
        return None
    plt = _plt()
    ms = _models(ledger, models, benchmark)
    all_m = [str(m) for m in d["model"].values]
    kk = [all_m.index(m) for m in ms]
    hidx = [int(np.flatnonzero(d["horizon"].values == h)[0]) for h in hs]
    tp = ledger.target_period.values[:, hidx]
    t_tp = [period_times(tp[:, j]) for j in range(len(hs))]
    per_var, ylims = {}, []
    for v in variables:
        q = ledger_quantiles(ledger, v, hs)
        ser = outcomes.get(v, pd.Series(dtype=float))
        ys = [ser.reindex([str(p) for p in tp[:, j]]).to_numpy(dtype=float) for j in range(len(hs))]
        # the axis holds all but the rarest extremes (a sudden stop would flatten every other
        # origin); outcomes beyond it are marked at the edge and counted in the legend
        yl = _robust_range([q[[1, 3]][:, kk], *ys, q[[0, -1]][:, kk]], 1.5, 98.5, 0.08)
        per_var[v] = (q, ys, yl)
        ylims += [yl] * len(ms)
    xl = _xlim(np.concatenate(t_tp))
    nrow = len(variables) * len(ms)
    fig = plt.figure(figsize=(PAGE_WIDTH, 0.72 * nrow + 1.1))
    top = suptitle(fig, "Past predictive bands against outcomes: every origin's forecast at its target period; "
                   "all panels share the x axis, the panels of a variable its y axis; recessions shaded")
    g = Grid(fig, nrow, len(hs), xlims=xl, ylims=ylims, margins=(0.95, 0.3, 0.1, top + 0.5), gap_x=0.04,
             gap_y=0.1)
    spans = recession_spans(regimes)
    beyond = 0
    for vi, v in enumerate(variables):
        q, ys, yl = per_var[v]
        for mi, m in enumerate(ms):
            i = vi * len(ms) + mi
            k = all_m.index(m)
            for j, h in enumerate(hs):
                first = i == 0 and j == 0
                t = t_tp[j]
                _grid_shade(g, i, j, spans)
                g.fill_between(i, j, t, q[0, k, :, j], q[-1, k, :, j], color=BAND_OUTER, lw=0,
                               label="5–95%" if first else None)
                g.fill_between(i, j, t, q[1, k, :, j], q[3, k, :, j], color=BAND_INNER, lw=0,
                               label="25–75%" if first else None)
                g.plot(i, j, t, q[2, k, :, j], color=style(mi)["color"], lw=0.9, label="median" if first else None)
                y = ys[j]
                inside = (y >= yl[0]) & (y <= yl[1])
                g.plot(i, j, t[inside], y[inside], **dict(FIRST_STYLE, ms=2.0),
                       label=mpl_text(f"outcome ({truth})") if first else None)
                for sel, edge, mk in ((y > yl[1], yl[1], "^"), (y < yl[0], yl[0], "v")):
                    if sel.any():
                        beyond += int(sel.sum()) if mi == 0 else 0
                        g.plot(i, j, t[sel], np.full(int(sel.sum()), edge), marker=mk, ls="none", color="black",
                               ms=3.5, zorder=6)
                if i == 0:
                    g.title(i, j, h_label(h))
            g.yticks(i, nice_ticks(*yl, n=2), size=6.5)
            g.row_label(i, mpl_text(f"{v}\n{m}"), offset_in=0.55, size=7)
    g.frames()
    for j in range(len(hs)):
        g.xticks(j, _year_tick_values(*xl, max_ticks=5))
    handles, labels = _legend_handles(g)
    if beyond:
        from matplotlib.lines import Line2D

        handles.append(Line2D([], [], marker="^", ls="none", color="black", ms=3.5))
        labels.append(f"outcome beyond the axis ({beyond})")
    _legend(fig, handles, labels, y_in=top + 0.02)
    return to_png(fig)


# ----------------------------------------------------------------------------- appendix: over time
def fluctuation_figure(evaluation, variables, *, mu: float | None = None) -> bytes | None:
    """The fluctuation test's path per model (panels) and horizon (lines), over the whole sample.

    The statistic is the rolling-window mean loss difference (model − incumbent) standardised
    by its full-sample long-run standard deviation; outside the dashed band ±k (the two-sided
    5 % critical value) the two differ significantly over that window. The x axis spans every
    target period the evaluation scored, so each recession of the sample is shaded; the path
    starts where the first full window ends (the bracket shows the window's length).

    References
    ----------
    Giacomini, R. and Rossi, B. (2010). Forecast comparisons in unstable environments. Journal of
    Applied Econometrics 25, 595–620.
    """
    from harness.report.panels import Grid, nice_ticks

    fl = evaluation.fluctuation
    if fl is None or not len(fl):
        return None
    variables = [v for v in variables if v in set(fl["variable"].astype(str).tolist())]
    if not variables:
        return None
    plt = _plt()
    import matplotlib as mpl

    bench = evaluation.benchmark
    models = [m for m in _model_order(evaluation) if m in set(fl["model"].tolist()) and m != bench]
    horizons = sorted(int(h) for h in pd.unique(fl["horizon"]))
    cmap = mpl.colormaps["viridis"]
    colours = {h: cmap(0.0 + 0.82 * k / max(len(horizons) - 1, 1)) for k, h in enumerate(horizons)}
    f = evaluation.forecasts
    scored = f[f["variable"].isin(variables) & (f["scored"].astype(bool) if "scored" in f else True)]
    xl = _xlim(period_times(pd.unique(scored["target_period"])))
    crit = float(np.nanmax(fl["critical"]))
    ymax = max(float(np.nanmax(np.abs(fl["stat"]))), crit) * 1.3
    fig = plt.figure(figsize=(PAGE_WIDTH, 1.7 * len(variables) + 1.3))
    mu_txt = f", window share μ = {mu:g}" if mu is not None and np.isfinite(mu) else ""
    top = suptitle(fig, f"Giacomini–Rossi fluctuation test on CRPS: rolling standardised mean difference, model − "
                   f"{bench} (below 0 = model better); dashed ±{crit:.2f}: 5% critical value{mu_txt}; recessions "
                   "shaded")
    g = Grid(fig, len(variables), len(models), xlims=xl, ylims=(-ymax, ymax),
             margins=(0.75, 0.55, 0.1, top + 0.5), gap_x=0.05, gap_y=0.22)
    spans = recession_spans(evaluation.regimes)
    for i, v in enumerate(variables):
        for j, m in enumerate(models):
            _grid_shade(g, i, j, spans)
            g.hspan(i, j, -crit, crit, color="0.965", lw=0, zorder=0.2)
            for c in (-crit, crit):
                g.hline(i, j, c, color="0.3", lw=0.8, ls=(0, (4, 2)), zorder=1)
            g.hline(i, j, 0.0, color="0.55", lw=0.5, zorder=1)
            gm = fl[(fl["variable"] == v) & (fl["model"] == m)]
            first_end = None
            for h in horizons:
                gh = gm[gm["horizon"] == h]
                if not len(gh):
                    continue
                t = period_times(gh["target_period"])
                g.plot(i, j, t, gh["stat"].to_numpy(dtype=float), color=colours[h], lw=1.0, zorder=2,
                       label=h_label(h) if i == 0 and j == 0 else None)
                first_end = t[0] if first_end is None else min(first_end, t[0])
            if first_end is not None:
                # the first window: from the first scored target to where the path can start
                yb = -ymax * 0.86
                g.plot(i, j, [xl[0] + 0.15, first_end], [yb, yb], color="0.2", lw=0.8, marker="|", ms=5)
                if j == 0:  # named once per row, inside the panel, starting at the bracket
                    g.text(i, j, xl[0] + 0.3, yb + ymax * 0.04, "first window", ha="left", va="bottom",
                           fontsize=6)
            if i == 0:
                g.title(i, j, mpl_text(f"{m} − {bench}"))
        g.yticks(i, nice_ticks(-ymax, ymax, n=5))
        g.row_label(i, mpl_text(f"{v}: fluctuation statistic"), offset_in=0.45)
    g.frames()
    # narrow panels take fewer year labels, so that neighbours' labels never touch
    n_ticks = max(2, min(5, 9 // max(len(models), 1)))
    for j in range(len(models)):
        g.xticks(j, _year_tick_values(*xl, max_ticks=n_ticks))
    g.xlabel("end of the rolling window (target period)", offset_in=0.25)
    handles, labels = _legend_handles(g)
    _legend(fig, handles, labels, y_in=top + 0.02, ncol=10)
    return to_png(fig)


# ----------------------------------------------------------------------------- calibration: PIT grid
def pit_grid_figure(evaluation, variables, horizons, *, bins: int = 10, title: str | None = None,
                    rows: str = "models") -> bytes | None:
    """PIT histograms in one set of axes: one panel per model, variable and horizon.

    ``rows="models"``: rows models, columns variable × horizon (the pack's panel);
    ``rows="variables"``: rows variable × model, columns horizons (every horizon, the appendix).
    Each panel: the histogram (density, uniform = 1), the dashed line at 1 and the pointwise
    95 % band of a bin's height under a uniform PIT (binomial, normal approximation: common
    practice). The number of PIT values is in the column title when it is the same for every
    model, else in the panel.

    References
    ----------
    Diebold, F. X., Gunther, T. A. and Tay, A. S. (1998). Evaluating density forecasts with
    applications to financial risk management. International Economic Review 39, 863–883.
    """
    f = evaluation.forecasts
    f = f[np.isfinite(f["pit"].to_numpy(dtype=float))] if "pit" in f else f.iloc[0:0]
    if not len(f):
        return None
    plt = _plt()
    from matplotlib.collections import PolyCollection

    models = [m for m in _model_order(evaluation) if m in set(f["model"].tolist())]
    present = set(zip(f["variable"].astype(str).tolist(), f["horizon"].astype(int).tolist(), strict=True))
    edges = np.linspace(0, 1, bins + 1)
    dens, ns = {}, {}
    for (m, v, h), g in f.groupby(["model", "variable", "horizon"], sort=False):
        x = g["pit"].to_numpy(dtype=float)
        c, _ = np.histogram(x, bins=edges)
        dens[(str(m), str(v), int(h))] = c / max(len(x), 1) * bins
        ns[(str(m), str(v), int(h))] = len(x)
    if rows == "models":
        cols = [(v, int(h)) for v in variables for h in horizons if (v, int(h)) in present]
        grid = [[(m, v, h) for v, h in cols] for m in models]
        row_names = list(models)
        col_names = [f"{v}, {h_label(h)}" for v, h in cols]
    else:
        hs = [int(h) for h in horizons if any((v, int(h)) in present for v in variables)]
        grid = [[(m, v, h) for h in hs] for v in variables for m in models]
        row_names = [f"{v}: {m}" for v in variables for m in models]
        col_names = [h_label(h) for h in hs]
    if not grid or not grid[0]:
        return None
    top = max([2.0] + [float(d.max()) * 1.08 for d in dens.values() if len(d)])
    nr, nc = len(grid), len(grid[0])
    # the n of a column, when every panel of it has the same
    col_n = []
    for j in range(nc):
        vals = {ns.get(grid[i][j], 0) for i in range(nr)}
        col_n.append(vals.pop() if len(vals) == 1 else None)
    col_names = [f"{name} · n {n}" if n is not None else name for name, n in zip(col_names, col_n, strict=True)]
    gap_x, gap_y = 0.12, 0.3 * top
    w_in = min(PAGE_WIDTH, 1.0 + 1.05 * nc)
    ph = 0.78 if nr <= 4 else 0.5
    h_in = ph * nr + 0.95
    fig = plt.figure(figsize=(w_in, h_in))
    head = suptitle(fig, title or "PIT histograms: flat = calibrated, hump = too wide, U = too narrow "
                    "(dashed: 1; grey: 95% band if uniform)")
    left = 0.75 if rows == "models" else 0.95
    ax = fig.add_axes([left / w_in, 0.08 / h_in, 1 - (left + 0.08) / w_in, 1 - (0.08 + head + 0.12) / h_in])
    ax.set_axis_off()
    polys, faces, bands, frames, dashes = [], [], [], [], []
    for i, row in enumerate(grid):
        y0 = (nr - 1 - i) * (top + gap_y)
        for j, (m, v, h) in enumerate(row):
            x0 = j * (1 + gap_x)
            frames.append([(x0, y0), (x0 + 1, y0), (x0 + 1, y0 + top), (x0, y0 + top)])
            dashes.append([(x0, y0 + 1), (x0 + 1, y0 + 1)])
            n = ns.get((m, v, h), 0)
            if n:
                p = 1 / bins
                half = 1.96 * np.sqrt(p * (1 - p) / n) * bins
                bands.append([(x0, y0 + 1 - half), (x0 + 1, y0 + 1 - half), (x0 + 1, y0 + 1 + half),
                              (x0, y0 + 1 + half)])
                colour = style(models.index(m))["color"]
                for b, hgt in enumerate(dens[(m, v, h)]):
                    a = x0 + edges[b]
                    polys.append([(a, y0), (a + 1 / bins, y0), (a + 1 / bins, y0 + hgt), (a, y0 + hgt)])
                    faces.append(colour)
            if col_n[j] is None:
                ax.text(x0 + 0.97, y0 + top * 0.97, f"n {n}", ha="right", va="top", fontsize=6)
            if i == 0:
                ax.text(x0 + 0.5, y0 + top + 0.05 * top, mpl_text(col_names[j]), ha="center", va="bottom",
                        fontsize=7 if rows == "models" else 6.5)
        ax.text(-0.06, y0 + top / 2, mpl_text(row_names[i]), ha="right", va="center",
                fontsize=7.5 if rows == "models" else 6.5)
    from matplotlib.collections import LineCollection

    ax.add_collection(PolyCollection(bands, facecolors="0.86", edgecolors="none", zorder=1))
    ax.add_collection(PolyCollection(polys, facecolors=faces, edgecolors="0.15", linewidths=0.3, alpha=0.9,
                                     zorder=2))
    ax.add_collection(PolyCollection(frames, facecolors="none", edgecolors="0.45", linewidths=0.5, zorder=3))
    ax.add_collection(LineCollection(dashes, colors="0.15", linewidths=0.7, linestyles=(0, (3, 2)), zorder=4))
    ax.set_xlim(-0.02, nc * (1 + gap_x) - gap_x + 0.02)
    ax.set_ylim(-0.02 * top, nr * (top + gap_y) - gap_y + 0.22 * top)
    return to_png(fig)


# ----------------------------------------------------------------------------- appendix: nowcasts
def nowcast_path_figure(ledger, evaluation, variables, *, models=None, n_quarters: int = 8,
                        horizons=(1, 0, -1)) -> bytes | None:
    """How each recent quarter's forecast moved through the origins that targeted it, against the outcome.

    One slot per target quarter (the last ``n_quarters`` with an outcome), one sub-slot per model:
    inside it the model's median forecast of that quarter at each successive origin whose
    horizon for it is in ``horizons`` (one quarter ahead, the nowcast, the backcast), left to
    right in origin order and joined; the horizontal black bar is the outcome. With several
    origins per quarter this is the nowcast path within the quarter.
    """
    d = ledger.draws
    hs = [h for h in horizons if h in [int(x) for x in d["horizon"].values]]
    variables = [v for v in variables if v in [str(x) for x in d["variable"].values]]
    if not hs or not variables:
        return None
    plt = _plt()
    ms = _models(ledger, models, evaluation.benchmark)
    all_m = [str(m) for m in d["model"].values]
    hidx = [int(np.flatnonzero(d["horizon"].values == h)[0]) for h in hs]
    tp = ledger.target_period.values[:, hidx]
    fc = evaluation.forecasts
    fig, axes = plt.subplots(1, len(variables), figsize=(PAGE_WIDTH, 2.6), squeeze=False)
    top = suptitle(fig, "Nowcast path: each quarter's median forecast at the successive origins that targeted it ("
                   + ", then ".join(h_label(h) for h in hs) + "), per model, against the outcome (black bar)")
    for j, v in enumerate(variables):
        ax = axes[0][j]
        med = ledger_quantiles(ledger, v, hs)[LEVELS.index(0.5)]
        truth = fc[(fc["variable"] == v)][["target_period", "truth"]].dropna(subset=["truth"])
        truth = truth.drop_duplicates("target_period").set_index("target_period")["truth"]
        quarters = [p for p in sorted(set(tp.ravel()), key=lambda s: pd.Period(s)) if p in truth.index]
        quarters = quarters[-n_quarters:]
        width = 0.8 / max(len(ms), 1)
        for qi, p in enumerate(quarters):
            o_idx, h_idx = np.nonzero(tp == p)
            order = np.argsort(o_idx)
            o_idx, h_idx = o_idx[order], h_idx[order]
            for k, m in enumerate(ms):
                y = med[all_m.index(m), o_idx, h_idx]
                x = qi - 0.4 + width * (k + np.linspace(0.2, 0.8, len(y)) if len(y) > 1 else k + 0.5)
                ax.plot(x, y, color=style(k)["color"], lw=1.0, marker=style(k)["marker"], ms=2.6,
                        label=mpl_text(m) if qi == 0 else None, zorder=3)
            ax.plot([qi - 0.45, qi + 0.45], [float(truth.loc[p])] * 2, color="black", lw=1.6, zorder=4,
                    label=f"outcome ({evaluation.truth})" if qi == 0 else None)
        ax.set_xticks(range(len(quarters)))
        ax.set_xticklabels(quarters, fontsize=6.5)
        ax.set_xlim(-0.6, len(quarters) - 0.4)
        ax.set_title(mpl_text(f"{v}: the last {len(quarters)} quarters with an outcome"))
    axes[0][0].set_ylabel("median forecast of the quarter")
    handles, labels = axes[0][0].get_legend_handles_labels()
    _legend(fig, handles, labels, y_in=top + 0.02)
    _layout(fig, left=0.6, top=top + 0.55, bottom=0.35, wspace=0.18)
    return to_png(fig)


def news_figure(frames) -> bytes | None:
    """What moved the nowcast: one horizontal bar chart per origin pair (news, revisions, re-estimation).

    ``frames`` are :func:`harness.evaluation.news.news_for_run` results; contributions are summed
    by variable and kind (:func:`harness.models.news.news_by_variable`) and add up to the total
    change of the forecast.

    References
    ----------
    Bańbura, M. and Modugno, M. (2014). Maximum likelihood estimation of factor models on
    datasets with arbitrary pattern of missing data. Journal of Applied Econometrics 29, 133–160.
    """
    frames = [f for f in (frames or []) if f is not None and len(f)]
    if not frames:
        return None
    from harness.models.news import news_by_variable

    plt = _plt()
    colours = {"news": PALETTE[0], "revision": PALETTE[1], "reestimation": PALETTE[2], "remainder": PALETTE[6]}
    groups = [news_by_variable(f) for f in frames]
    groups = [g[g["kind"].astype(str) != "total"] for g in groups]
    n = max(len(g) for g in groups)
    # at most two panels a row, so that each keeps room for its labels and title
    ncol = min(2, len(frames))
    nrow = -(-len(frames) // ncol)
    fig, axes = plt.subplots(nrow, ncol, figsize=(PAGE_WIDTH, nrow * (0.22 * n + 1.2) + 0.5), squeeze=False,
                             sharex=True)
    for ax in axes.flat[len(frames):]:
        ax.set_visible(False)
    for ax, f, g in zip(list(axes.flat)[:len(frames)], frames, groups, strict=True):
        kinds = g["kind"].astype(str).to_numpy()
        labels = [f"{v} ({k})" if k in ("news", "revision") else k for v, k in zip(g["variable"], kinds, strict=True)]
        y = np.arange(len(g))[::-1]
        ax.barh(y, g["contribution"].to_numpy(dtype=float), color=[colours.get(k, "0.5") for k in kinds],
                height=0.7)
        ax.set_yticks(y)
        ax.set_yticklabels([mpl_text(t) for t in labels])
        ax.axvline(0.0, color="black", lw=0.7)
        a = f.attrs
        ax.set_title(mpl_text(f"{a.get('model', '')}: {a.get('target', '')} {a.get('period', '')}, "
                              f"{a.get('origin_old', '')} → {a.get('origin_new', '')}\n"
                              f"{a.get('forecast_old', np.nan):.2f} → {a.get('forecast_new', np.nan):.2f} "
                              f"(total {a.get('forecast_new', np.nan) - a.get('forecast_old', np.nan):+.2f})"),
                     fontsize=7.5)
    top = suptitle(fig, "What moved the nowcast: the change of the point forecast between two origins, split into "
                   "the news of each release, revisions and re-estimation")
    fig.text(0.5, 0.01, "contribution to the change of the forecast (in the target's units)", ha="center", va="bottom",
             fontsize=8)
    _layout(fig, left=1.25, top=top + 0.45, bottom=0.55, wspace=0.9, hspace=0.45)
    return to_png(fig)


def pool_weights_figure(weights: pd.DataFrame, *, horizon: int | None = None) -> bytes | None:
    """Each pool's member weights over the origins as a stacked area (one panel per pool × variable).

    ``weights`` is the run's pools table (pool, origin, variable, horizon, model, weight,
    fallback); the panels show ``horizon`` (default the smallest non-negative one). Origins where
    the pool fell back to equal weights are hatched.
    """
    if weights is None or not len(weights):
        return None
    plt = _plt()
    w = weights.copy()
    hs = sorted(int(h) for h in pd.unique(w["horizon"]))
    h = horizon if horizon is not None else next((x for x in hs if x >= 0), hs[0])
    w = w[w["horizon"] == h]
    pools = list(pd.unique(w["pool"]))
    variables = list(pd.unique(w["variable"]))
    fig, axes = plt.subplots(len(pools), len(variables), figsize=(PAGE_WIDTH, 1.5 * len(pools) + 1.0),
                             squeeze=False, sharex=True, sharey=True)
    for i, p in enumerate(pools):
        for j, v in enumerate(variables):
            ax = axes[i][j]
            g = w[(w["pool"] == p) & (w["variable"] == v)]
            wide = g.pivot_table(index="origin", columns="model", values="weight", aggfunc="first").sort_index()
            t = decimal_year(pd.DatetimeIndex(wide.index))
            ax.stackplot(t, *[wide[c].fillna(0.0).to_numpy() for c in wide.columns],
                         labels=[mpl_text(c) for c in wide.columns],
                         colors=[style(k)["color"] for k in range(wide.shape[1])], alpha=0.85, lw=0)
            if "fallback" in g:
                fb = g.groupby("origin")["fallback"].any().reindex(wide.index).fillna(False).to_numpy(dtype=bool)
                if fb.any():
                    ax.fill_between(t, 0, 1, where=fb, step="mid", facecolor="none", edgecolor="0.2", hatch="///",
                                    lw=0, label="equal-weight fallback")
            ax.set_ylim(0, 1)
            if len(t):
                _year_ticks(ax, float(t.min()), float(t.max()), max_ticks=5)
            if i == 0:
                ax.set_title(mpl_text(f"{v}, {h_label(h)}"))
            if j == 0:
                ax.set_ylabel(mpl_text(f"{p}\nweight"))
    handles, labels = axes[0][0].get_legend_handles_labels()
    top = suptitle(fig, "Pool weights over time: each member's weight at each origin (stacked; they sum to 1)")
    _legend(fig, handles, labels, y_in=top + 0.02)
    _layout(fig, left=0.7, top=top + 0.45, bottom=0.35, wspace=0.06, hspace=0.25)
    return to_png(fig)


def diagnostics_figure(diag: pd.DataFrame, max_panels: int = 8) -> bytes | None:
    """Model diagnostics over the origins (BVAR hyperparameters, MCMC effective sample sizes …).

    ``diag`` has columns ``model, origin, name, value``; one panel per (model, name), at most
    ``max_panels`` (the table in the appendix has them all).
    """
    if diag is None or not len(diag):
        return None
    plt = _plt()
    keys = list(dict.fromkeys(zip(diag["model"].astype(str), diag["name"].astype(str), strict=True)))[:max_panels]
    ncol = min(4, len(keys))
    nrow = int(np.ceil(len(keys) / ncol))
    fig, axes = plt.subplots(nrow, ncol, figsize=(PAGE_WIDTH, 1.45 * nrow + 0.6), squeeze=False, sharex=True)
    for k, (m, name) in enumerate(keys):
        ax = axes[k // ncol][k % ncol]
        g = diag[(diag["model"].astype(str) == m) & (diag["name"].astype(str) == name)].sort_values("origin")
        t = decimal_year(pd.DatetimeIndex(pd.to_datetime(g["origin"])))
        ax.plot(t, g["value"].to_numpy(dtype=float), color=PALETTE[0], lw=1.0, marker="o", ms=1.8)
        ax.set_title(mpl_text(f"{m}: {name}"), fontsize=7.5)
        if len(t):
            _year_ticks(ax, float(t.min()), float(t.max()), max_ticks=4)
    for k in range(len(keys), nrow * ncol):
        axes[k // ncol][k % ncol].set_visible(False)
    top = suptitle(fig, "Model diagnostics over the origins")
    _layout(fig, left=0.45, top=top + 0.25, bottom=0.3, wspace=0.3, hspace=0.45)
    return to_png(fig)


def truth_series(evaluation, variable) -> pd.Series:
    """Outcome per target period label of one variable under the evaluation's truth."""
    f = evaluation.forecasts
    f = f[f["variable"] == variable][["target_period", "truth"]].dropna().drop_duplicates("target_period")
    return pd.Series(f["truth"].to_numpy(dtype=float), index=f["target_period"].astype(str).to_numpy())


def _model_order(evaluation) -> list[str]:
    models = [str(m) for m in pd.unique(evaluation.forecasts["model"])]
    b = evaluation.benchmark
    return ([b] if b in models else []) + [m for m in models if m != b]
