"""The pairwise test matrix among all models: every ordered pair, per variable and horizon (appendix).

The evaluation tests each model against the incumbent only; a review sometimes asks whether two
candidates differ from each other. This read helper runs the registered pairwise test
(:mod:`harness.compare.registry`, the same test and settings as the evaluation's) on every pair
of models over the forecasts both produced, full sample, for one loss score.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.report.builders import _var_order, model_order
from harness.report.escape import slug
from harness.report.grid import Cell, GridTable, RowGroup
from harness.report.labels import h_label


def pairwise_frame(evaluation, *, score: str = "crps", subperiod: str = "full") -> pd.DataFrame:
    """Every ordered pair (row model, column model): loss ratio, test p-value, n, per variable × horizon.

    Returns
    -------
    DataFrame
        ``variable, horizon, model, versus, ratio, pvalue, n, note`` (typed): ``ratio`` is the
        mean ``score`` of ``model`` over that of ``versus`` on their common forecasts; ``pvalue``
        the two-sided p-value of the registered pairwise test (NaN where n is too small, with the
        test's note).

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. JBES 13, 253–263;
    Harvey, D., Leybourne, S. and Newbold, P. (1997). IJF 13, 281–291.
    """
    from harness.compare.registry import cell_seed, comparison_tests, too_small
    from harness.evaluation import steps_ahead

    f = evaluation.forecasts
    cols = ["variable", "horizon", "model", "versus", "ratio", "pvalue", "n", "note"]
    if score not in f or not len(f):
        return pd.DataFrame(columns=cols)
    pair = comparison_tests("pairwise")[0]
    man = evaluation.manifest
    settings = getattr(getattr(man, "scoring", None), "tests", None) or {}
    params = pair.settings(settings.get(pair.name))
    seed = int(getattr(man, "seed", 0) or 0)
    f = f[f["subperiods"].map(lambda s: subperiod in s)] if subperiod != "full" else f
    rows = []
    for var, g in f.groupby("variable", sort=True):
        # one dense (origin, model, horizon) array per variable instead of a pivot per cell
        origins = np.sort(pd.unique(g["origin"]))
        models = model_order(pd.unique(g["model"]), evaluation.benchmark)
        hs = sorted(int(h) for h in pd.unique(g["horizon"]))
        arr = np.full((len(origins), len(models), len(hs)), np.nan)
        arr[np.searchsorted(origins, g["origin"].to_numpy()), pd.Index(models).get_indexer(g["model"].astype(str)),
            pd.Index(hs).get_indexer(g["horizon"].astype(int))] = g[score].to_numpy(dtype=float)
        for k, h in enumerate(hs):
            steps = steps_ahead(h)
            for i, a in enumerate(models):
                for j in range(i + 1, len(models)):
                    b = models[j]
                    ok = np.isfinite(arr[:, i, k]) & np.isfinite(arr[:, j, k])
                    x, y = arr[ok, i, k], arr[ok, j, k]
                    mx, my = (float(x.mean()), float(y.mean())) if len(x) else (np.nan, np.nan)
                    res = too_small(pair, len(x), steps, params)
                    if res is None:
                        s = cell_seed(seed, pair.name, (var, h, subperiod, score, a, b)) if pair.seeded else 0
                        res = pair.run(x, y, h=steps, seed=s, params=params)
                    # a two-sided test of equal accuracy is symmetric: one run serves both orders
                    for m, v, num, den in ((a, b, mx, my), (b, a, my, mx)):
                        rows.append(dict(variable=str(var), horizon=h, model=m, versus=v,
                                         ratio=num / den if den > 0 else np.nan, pvalue=float(res.pvalue),
                                         n=int(res.n), note=str(res.note or "")))
    out = pd.DataFrame(rows, columns=cols)
    return out.astype({"horizon": int, "ratio": float, "pvalue": float, "n": int}) if len(out) else out


def pairwise_tables(evaluation, *, score: str = "crps", variables=None, frame: pd.DataFrame | None = None
                    ) -> list[GridTable]:
    """One matrix per variable: row groups horizons, rows the model, columns the model it is set against."""
    pf = pairwise_frame(evaluation, score=score) if frame is None else frame
    if not len(pf):
        return []
    tables = []
    for var in _var_order(pf["variable"], variables):
        sub = pf[pf["variable"] == var]
        models = model_order(list(sub["model"]) + list(sub["versus"]), evaluation.benchmark)
        look = {(a, b, int(h)): (r, p, n, note) for a, b, h, r, p, n, note in
                zip(sub["model"], sub["versus"], sub["horizon"], sub["ratio"], sub["pvalue"], sub["n"],
                    sub["note"].astype(str), strict=True)}
        groups = []
        for h in sorted(int(x) for x in pd.unique(sub["horizon"])):
            rows = []
            for a in models:
                cells = []
                for b in models:
                    r = look.get((a, b, h))
                    cells.append(Cell(float(r[0]), int(r[2]), float(r[1]) if np.isfinite(r[1]) else None,
                                      note="n too small" if r[3].startswith("n too small") else "")
                                 if r else Cell(np.nan))
                rows.append((a, cells))
            groups.append(RowGroup(h_label(h), {"variable": str(var), "horizon": h}, rows))
        tables.append(GridTable(
            name=slug("pairwise", var), title=f"{var}: every model against every other ({score.upper()} ratio, "
            "row model ÷ column model, full sample)", columns=[(b,) for b in models],
            column_levels=("versus",), row_name="model", groups=groups, best=None, digits=2,
            group_name="horizon",
            notes=["Below 1: the row model has the lower mean loss. Marks and p: the registered pairwise test of "
                   "equal accuracy on the forecasts both models produced (\u2193 row significantly better, "
                   "\u2191 worse); no mark where n is too small to test."]))
    return tables
