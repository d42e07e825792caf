"""The report's figures (matplotlib, Agg backend, imported lazily): PNG bytes to embed and save.

Every figure reads in grey print and for colour-blind readers: the Okabe–Ito palette, one line
style and marker per model, recessions as light grey bands, bands in greys of distinct lightness.

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

# Okabe & Ito (2008) palette (without yellow, too light on white).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#000000")
LINESTYLES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 1)), (0, (8, 2)))
MARKERS = ("o", "s", "^", "D", "v", "P", "X")
DPI = 100


def _plt():
    """matplotlib.pyplot on the Agg backend (imported only when a figure is drawn)."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

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


def period_times(labels, freq: str = "Q") -> np.ndarray:
    """Mid-period positions of period labels, in decimal years."""
    p = pd.PeriodIndex([str(x) for x in labels], freq=freq)
    return decimal_year(p.start_time + (p.end_time - p.start_time) / 2)


def _layout(fig, *, left=0.75, right=0.2, top=0.75, bottom=0.5, wspace=0.25, hspace=0.45) -> None:
    """Margins in inches (fixed room for labels and the legend); cheaper than tight layouts."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=left / w, right=1 - right / w, top=1 - top / h, bottom=bottom / h,
                        wspace=wspace, hspace=hspace)


def _year_axis(ax) -> None:
    from matplotlib.ticker import FormatStrFormatter, MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(nbins=5, integer=True))
    ax.xaxis.set_major_formatter(FormatStrFormatter("%d"))


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
        ax.axvspan(a, b, color="0.85", zorder=0.6, lw=0)
    if xlim is not None:
        ax.set_xlim(*xlim)


def _xlim(t) -> tuple[float, float] | None:
    t = np.asarray(t, dtype=float)
    t = t[np.isfinite(t)]
    if not len(t):
        return None
    pad = max(0.02 * (t.max() - t.min()), 0.15)
    return float(t.min() - pad), float(t.max() + pad)


def _grid(n: int, ncols: int = 3):
    ncols = max(1, min(ncols, n))
    nrows = int(np.ceil(n / ncols))
    return nrows, ncols


def fluctuation_figure(evaluation, variable) -> bytes | None:
    """Rolling relative CRPS (fluctuation statistic) per model and horizon with the critical band.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
    variable : str

    Returns
    -------
    bytes or None
        PNG; ``None`` when there is no fluctuation path for ``variable``.

    References
    ----------
    Giacomini, R. and Rossi, B. (2010). Forecast comparisons in unstable environments. Journal of
    Applied Econometrics 25, 595–620.
    """
    fl = evaluation.fluctuation
    if fl is None or not len(fl):
        return None
    fl = fl[fl["variable"] == variable]
    if not len(fl):
        return None
    plt = _plt()
    horizons = sorted(int(h) for h in pd.unique(fl["horizon"]))
    nrows, ncols = _grid(len(horizons))
    fig, axes = plt.subplots(nrows, ncols, figsize=(4.0 * ncols + 0.9, 2.5 * nrows + 1.1), sharey=True,
                             squeeze=False)
    spans = recession_spans(evaluation.regimes)
    models = [m for m in _model_order(evaluation) if m in set(fl["model"])]
    xlim_all = _xlim(period_times(pd.unique(fl["target_period"])))
    for k, h in enumerate(horizons):
        ax = axes[k // ncols][k % ncols]
        g = fl[fl["horizon"] == h]
        crit = float(np.nanmax(g["critical"])) if len(g) else np.nan
        if np.isfinite(crit):
            ax.axhspan(-crit, crit, color="0.96", zorder=0, lw=0)
            for c in (-crit, crit):
                ax.axhline(c, color="0.35", lw=0.9, ls=(0, (4, 2)), zorder=1)
        ax.axhline(0, color="0.6", lw=0.6, zorder=1)
        for i, m in enumerate(models):
            gm = g[g["model"] == m]
            if not len(gm):
                continue
            st = style(i + 1)
            t = period_times(gm["target_period"])
            ax.plot(t, gm["stat"].to_numpy(), color=st["color"], ls=st["linestyle"], lw=1.5,
                    marker=st["marker"], markevery=max(len(gm) // 6, 1), ms=4, label=mpl_text(m), zorder=2)
        _shade(ax, spans, xlim_all)
        ax.set_title(f"horizon {h}", fontsize=10)
        ax.tick_params(labelsize=8)
        _year_axis(ax)
    for k in range(len(horizons), nrows * ncols):
        axes[k // ncols][k % ncols].set_visible(False)
    handles, labels = axes[0][0].get_legend_handles_labels()
    fig.suptitle(mpl_text(f"{variable}: rolling relative CRPS, 5% critical band (dashed), recessions shaded"),
                 fontsize=11, y=0.995, va="top")
    fig.legend(handles, labels, loc="upper center", ncol=min(len(labels), 6) or 1, frameon=False, fontsize=9,
               bbox_to_anchor=(0.5, 1 - 0.3 / fig.get_size_inches()[1]))
    fig.supylabel("standardised rolling CRPS difference\n(model − benchmark; below 0 = model better)", fontsize=9)
    _layout(fig, left=0.95, top=0.8, bottom=0.35, wspace=0.12, hspace=0.4)
    return to_png(fig)


def pit_figure(evaluation, variable, bins: int = 10) -> bytes | None:
    """PIT histograms: one panel per model (rows) and horizon (columns), uniform line and band.

    The band is the pointwise 95% interval of a bin's height under a uniform PIT (binomial,
    normal approximation: common practice).

    References
    ----------
    Diebold, F. X., Gunther, T. A. and Tay, A. S. (1998). Evaluating density forecasts with
    applications to financial risk management. International Economic Review 39, 863–883.
    """
    f = evaluation.forecasts
    f = f[(f["variable"] == variable) & np.isfinite(f["pit"].to_numpy(dtype=float))]
    if not len(f):
        return None
    plt = _plt()
    models = [m for m in _model_order(evaluation) if m in set(f["model"])]
    horizons = sorted(int(h) for h in pd.unique(f["horizon"]))
    fig, axes = plt.subplots(len(models), len(horizons), figsize=(1.8 * len(horizons) + 1.0, 1.45 * len(models) + 0.8),
                             sharex=True, sharey=True, squeeze=False)
    edges = np.linspace(0, 1, bins + 1)
    ymax = 2.5
    for i, m in enumerate(models):
        for j, h in enumerate(horizons):
            ax = axes[i][j]
            x = f.loc[(f["model"] == m) & (f["horizon"] == h), "pit"].to_numpy(dtype=float)
            n = len(x)
            if n:
                counts, _ = np.histogram(x, bins=edges)
                dens = counts / n * bins
                p = 1 / bins
                half = 1.96 * np.sqrt(p * (1 - p) / n) * bins
                ax.axhspan(1 - half, 1 + half, color="0.88", lw=0, zorder=0)
                ax.bar(edges[:-1], dens, width=1 / bins, align="edge", color=style(i)["color"], alpha=0.85,
                       edgecolor="0.15", lw=0.4, zorder=1)
                ymax = max(ymax, float(dens.max()) * 1.1)
            ax.axhline(1, color="0.2", lw=0.8, ls="--", zorder=2)
            ax.text(0.97, 0.92, f"n={n}", transform=ax.transAxes, ha="right", va="top", fontsize=7)
            if i == 0:
                ax.set_title(f"h = {h}", fontsize=9)
            if j == 0:
                ax.set_ylabel(mpl_text(m), fontsize=9)
            ax.tick_params(labelsize=7)
    ax0 = axes[0][0]
    ax0.set_ylim(0, ymax)
    ax0.set_xlim(0, 1)
    ax0.set_xticks([0.2, 0.5, 0.8])
    fig.suptitle(mpl_text(f"{variable}: PIT histograms (uniform = calibrated; grey band: 95% under uniformity)"),
                 fontsize=10, y=0.995, va="top")
    _layout(fig, left=0.75, right=0.15, top=0.55, bottom=0.35, wspace=0.08, hspace=0.15)
    return to_png(fig)


def truth_series(evaluation, variable) -> pd.Series:
    """Outcome per target period label of one variable under the evaluation's truth."""
    f = evaluation.forecasts
    f = f[f["variable"] == variable][["target_period", "truth"]].dropna().drop_duplicates("target_period")
    return pd.Series(f["truth"].to_numpy(dtype=float), index=f["target_period"].astype(str).to_numpy())


def fan_quantiles(ledger, variable, origins, levels=(0.05, 0.25, 0.5, 0.75, 0.95)) -> np.ndarray:
    """Predictive quantiles from the ledger's draws: array (level, model, origin, horizon)."""
    d = ledger.draws.sel(variable=variable, origin=origins).transpose("model", "origin", "horizon", "draw").values
    d = np.asarray(d, dtype=np.float64)
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices = failed tasks
            return np.nanquantile(d, levels, axis=-1)


def fan_horizons(horizons) -> list[int]:
    """The nowcast, one quarter ahead and the longest horizon (those present)."""
    hs = sorted(int(h) for h in horizons)
    pick = [h for h in (0, 1) if h in hs]
    if hs and hs[-1] not in pick:
        pick.append(hs[-1])
    return pick or hs[:1]


def fan_figure(ledger, variable, truths: dict[str, pd.Series], *, models=None, benchmark=None,
               n_recent: int = 12, horizons=None, regimes=None) -> bytes | None:
    """Predictive bands (5–95%, 25–75%) and median at the recent origins against the outcomes.

    One panel per model (rows) and selected horizon (columns); in a panel, the forecast made at
    each of the last ``n_recent`` origins for that horizon is placed at its target period, and
    the outcomes under each truth (e.g. first and latest release) are drawn as markers.

    Parameters
    ----------
    ledger : harness.backtest.Ledger
    variable : str
    truths : dict
        Truth name → Series of outcomes indexed by target period label.
    """
    d = ledger.draws
    if variable not in [str(v) for v in d["variable"].values]:
        return None
    plt = _plt()
    origins = d["origin"].values[-n_recent:]
    all_models = [str(m) for m in d["model"].values]
    models = [m for m in (models or all_models) if m in all_models]
    if benchmark in models:
        models = [benchmark] + [m for m in models if m != benchmark]
    hs = horizons or fan_horizons(d["horizon"].values)
    q = fan_quantiles(ledger, variable, origins)  # (5, model, origin, horizon)
    midx = [all_models.index(m) for m in models]
    hidx = [int(np.flatnonzero(d["horizon"].values == h)[0]) for h in hs]
    tp = ledger.target_period.sel(origin=origins).values  # (origin, horizon)
    fig, axes = plt.subplots(len(models), len(hs), figsize=(4.0 * len(hs) + 0.8, 2.2 * len(models) + 1.3),
                             sharex="col", squeeze=False)
    spans = recession_spans(regimes)
    # Outcomes in black with distinct shapes (model colours stay for the medians).
    truth_styles = [dict(marker="o", mfc="white", mec="black", color="black", ms=5, ls="none", zorder=4),
                    dict(marker="D", mfc="#D55E00", mec="black", color="#D55E00", ms=4.5, ls="none", mew=0.6,
                         zorder=5),
                    dict(marker="s", mfc="#56B4E9", mec="black", color="#56B4E9", ms=4, ls="none", mew=0.6,
                         zorder=4)]
    xlims = [_xlim(period_times(tp[:, hi])) for hi in hidx]
    for i, (m, mi) in enumerate(zip(models, midx, strict=True)):
        for j, (h, hi) in enumerate(zip(hs, hidx, strict=True)):
            ax = axes[i][j]
            labels = [str(x) for x in tp[:, hi]]
            t = period_times(labels)
            lo, q25, med, q75, hi_ = (q[k, mi, :, hi] for k in range(5))
            ax.fill_between(t, lo, hi_, color="0.87", lw=0, label="5–95%")
            ax.fill_between(t, q25, q75, color="0.68", lw=0, label="25–75%")
            # One model per panel: the median in black reads on both bands and in grey print.
            ax.plot(t, med, color="black", ls="-", lw=1.3, label="median")
            for k, (name, s) in enumerate(truths.items()):
                y = s.reindex(labels).to_numpy(dtype=float)
                ax.plot(t, y, label=mpl_text(f"outcome ({name})"), **truth_styles[k % len(truth_styles)])
            _shade(ax, spans, xlims[j])
            if i == 0:
                ax.set_title(f"h = {h}", fontsize=10)
            if j == 0:
                ax.set_ylabel(mpl_text(m), fontsize=10)
            ax.tick_params(labelsize=8)
            _year_axis(ax)
    handles, labs = axes[0][0].get_legend_handles_labels()
    fig.suptitle(mpl_text(f"{variable}: forecasts at the last {len(origins)} origins, placed at their target "
                          "period"), fontsize=11, y=0.995, va="top")
    fig.legend(handles, labs, loc="upper center", ncol=len(labs), frameon=False, fontsize=9,
               bbox_to_anchor=(0.5, 1 - 0.3 / fig.get_size_inches()[1]))
    _layout(fig, left=0.8, top=0.85, bottom=0.35, wspace=0.18, hspace=0.2)
    return to_png(fig)


def _model_order(evaluation) -> list[str]:
    models = [str(m) for m in pd.unique(evaluation.forecasts["model"])]
    b = evaluation.benchmark
    return ([b] if b in models else []) + [m for m in models if m != b]
