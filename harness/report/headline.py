"""Plain-words verdicts per target variable, derived from an evaluation's tables."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.scores import resolve


def format_horizons(hs) -> str:
    """Horizons as compact runs: ``[-1, 0, 1, 3]`` → ``"-1 to 1, 3"``."""
    hs = sorted({int(h) for h in hs})
    if not hs:
        return "none"
    runs, start, prev = [], hs[0], hs[0]
    for h in hs[1:] + [None]:
        if h is not None and h == prev + 1:
            prev = h
            continue
        runs.append(str(start) if start == prev else f"{start}, {prev}" if prev == start + 1 else f"{start} to {prev}")
        if h is not None:
            start = prev = h
    return ", ".join(runs)


def _best_by_horizon(table: pd.DataFrame, variable, subperiod: str, score: str) -> dict[int, str | None]:
    """The model with the lowest mean score per horizon; ``None`` where several share the minimum."""
    t = table[(table["variable"] == variable) & (table["subperiod"] == subperiod)]
    t = t[np.isfinite(t[score].to_numpy(dtype=float))] if score in t else t.iloc[0:0]
    if not len(t):
        return {}
    out: dict[int, str | None] = {}
    for h, g in t.groupby("horizon", sort=True):
        v = g[score].to_numpy(dtype=float)
        lo = v.min()
        # Equal to within rounding (e.g. every model reproduces an already published value).
        tied = np.isclose(v, lo, rtol=1e-9, atol=1e-12)
        out[int(h)] = str(g["model"].to_numpy()[np.argmin(v)]) if tied.sum() == 1 else None
    return out


def headline(evaluation, variable, *, alpha: float = 0.10, score: str = "crps") -> str:
    """A plain-words verdict for one target variable, derived from the evaluation's tables.

    The leader is the model with the lowest mean ``score`` (full sample) at the most horizons
    (ties: lower mean ratio to the benchmark). The sentence then says at how many of those
    horizons it beats the benchmark significantly (HLN-corrected Diebold–Mariano test at level
    ``alpha``, better = negative mean loss difference), whether it stays best in recessions, and
    where the model confidence set holds it alone.

    Parameters
    ----------
    evaluation : harness.evaluation.Evaluation
    variable : str
    alpha : float
        Significance level of the test.
    score : str
        A loss score column of ``evaluation.table``.

    Returns
    -------
    str
        Plain text (not escaped).

    References
    ----------
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13, 281–291. Hansen, P. R., Lunde, A.
    and Nason, J. M. (2011). The model confidence set. Econometrica 79, 453–497.
    """
    label = _score_label(score)
    best = _best_by_horizon(evaluation.table, variable, "full", score)
    if not best:
        return f"{variable}: no scored forecasts yet (no published truth for any target)."
    bench = evaluation.benchmark
    ties = sorted(h for h, m in best.items() if m is None)
    best = {h: m for h, m in best.items() if m is not None}
    if not best:
        return f"{variable}: all models have the same {label} at every horizon (h = {format_horizons(ties)})."
    counts = pd.Series(list(best.values())).value_counts()
    top = counts[counts == counts.max()].index.tolist()
    if len(top) > 1:
        rel = evaluation.relative
        rel = rel[(rel["variable"] == variable) & (rel["subperiod"] == "full")] if score in rel else rel.iloc[0:0]
        means = rel.groupby("model")[score].mean() if len(rel) else pd.Series(dtype=float)
        top = sorted(top, key=lambda m: (means.get(m, np.inf), m))
    leader = top[0]
    wins = sorted(h for h, m in best.items() if m == leader)
    n_h = len(best)
    parts = [f"{variable}: {leader} has the lowest {label} at {len(wins)} of {n_h} horizons "
             f"(h = {format_horizons(wins)}"
             + (f"; all models tie at h = {format_horizons(ties)})" if ties else ")")]
    tests = evaluation.tests
    pct = f"{alpha * 100:g}%"
    if tests is not None and len(tests):
        t = tests[(tests["variable"] == variable) & (tests["score"] == score) & (tests["subperiod"] == "full")]
        sig = t[(t["pvalue"] < alpha) & (t["mean_diff"] < 0)]
        if leader != bench:
            hs = sorted(sig.loc[sig["model"] == leader, "horizon"].astype(int))
            parts.append(f"significantly better than {bench} (HLN-DM, {pct}) at "
                         + (f"{len(hs)} horizon{'s' if len(hs) > 1 else ''} (h = {format_horizons(hs)})" if hs
                            else "no horizon"))
        else:
            if not len(sig):
                parts.append(f"no model beats {bench} significantly (HLN-DM, {pct}) at any horizon")
            else:
                by = sig.groupby("model")["horizon"].apply(lambda s: sorted(s.astype(int)))
                parts.append("; ".join(f"{m} beats it significantly (HLN-DM, {pct}) at h = {format_horizons(hs)}"
                                       for m, hs in by.items()))
    rec = _best_by_horizon(evaluation.table, variable, "recession", score)
    if rec:
        t = evaluation.table
        nr = t.loc[(t["variable"] == variable) & (t["subperiod"] == "recession") & (t["model"] == leader)
                   & t["horizon"].isin(wins), "n"]
        size = (f" (recession sample: {int(nr.min())}–{int(nr.max())} forecasts per horizon)"
                if len(nr) and nr.min() != nr.max() else
                f" (recession sample: {int(nr.min())} forecasts per horizon)" if len(nr) else "")
        stays = sorted(h for h in wins if rec.get(h) == leader)
        if stays:
            parts.append(f"it stays best in recessions at h = {format_horizons(stays)}{size}")
        else:
            parts.append(f"it is not the best in recessions at any of those horizons{size}")
    mcs = evaluation.mcs
    if mcs is not None and len(mcs):
        mv = mcs[mcs["variable"] == variable]
        inside = mv[mv["in_mcs"].astype(bool)]
        sizes = inside.groupby("horizon")["model"].agg(list)
        alone = sorted(int(h) for h, ms in sizes.items() if ms == [leader])
        if alone:
            a = float(mv["alpha"].iloc[0]) if "alpha" in mv else alpha
            parts.append(f"the {a * 100:g}% model confidence set holds {leader} alone at h = {format_horizons(alone)}")
    return "; ".join(parts) + "."


def _score_label(score: str) -> str:
    col = resolve(score)
    return col.label if col is not None else score
