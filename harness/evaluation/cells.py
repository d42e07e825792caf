"""Run the registered comparison and calibration tests over the cells of an evaluation.

A *cell* is a (variable, horizon[, sub-period, score, model]) combination of the per-forecast
scores. Which tests run on which score columns is read from the registries (a score lists its
tests, a test declares its kind, minimum sample, settings and whether it is seeded); nothing
here names a particular test or score.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from harness.compare.registry import ComparisonTest, cell_seed, comparison_tests, too_small
from harness.scores import resolve


def steps_ahead(h) -> int:
    """Steps ahead for the tests' HAC lags: h + 1 periods separate origin and target at horizon h ≥ 0
    (the origin's own period is not yet observed); backcasts count as one step."""
    return max(int(h) + 1, 1)


def _columns_for(test: ComparisonTest, frame: pd.DataFrame, only: Sequence[str] | None) -> list[str]:
    out = []
    for c in frame.columns:
        col = resolve(c)
        if col is not None and test.name in col.score.tests and (only is None or c in only):
            out.append(c)
    return out


def _panels(g: pd.DataFrame, scores: Sequence[str]):
    """Per (variable, horizon) group: origins, target periods, sub-period sets, models, loss arrays."""
    g = g.sort_values("origin")
    origins = np.sort(pd.unique(g["origin"]))
    oi = np.searchsorted(origins, g["origin"].to_numpy())
    models = list(pd.unique(g["model"]))
    mi = pd.Index(models).get_indexer(g["model"])
    arrays = {}
    for sc in scores:
        if sc in g:
            arr = np.full((len(origins), len(models)), np.nan)
            arr[oi, mi] = g[sc].to_numpy(dtype=np.float64)
            arrays[sc] = arr
    first = g.drop_duplicates("origin")
    tps = first.set_index("origin").reindex(origins)
    return origins, tps["target_period"].to_numpy(), tps["subperiods"].to_list(), models, arrays


def pairwise_tests(fc: pd.DataFrame, benchmark: str, *, seed: int,
                   settings: Mapping[str, Mapping[str, Any]] | None = None,
                   scores: Sequence[str] | None = None) -> pd.DataFrame:
    """Every pairwise test, each model against the benchmark, per variable × horizon × sub-period × score."""
    rows = []
    subs = list(dict.fromkeys(x for ss in fc["subperiods"] for x in ss))
    for test in comparison_tests("pairwise"):
        params = test.settings((settings or {}).get(test.name))
        cols = _columns_for(test, fc, scores)
        if not cols:
            continue
        for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
            origins, _, sublists, models, arrays = _panels(g, cols)
            if benchmark not in models:
                continue
            masks = {s: np.array([s in (sl if isinstance(sl, list) else []) for sl in sublists]) for s in subs}
            jb = models.index(benchmark)
            steps = steps_ahead(h)
            for score, arr in arrays.items():
                for j, model in enumerate(models):
                    if model == benchmark:
                        continue
                    pair_ok = np.isfinite(arr[:, j]) & np.isfinite(arr[:, jb])
                    for sname, mask in masks.items():
                        sel = pair_ok & mask
                        n = int(sel.sum())
                        res = too_small(test, n, steps, params)
                        if res is None:
                            s = cell_seed(seed, test.name, (var, h, sname, score, model)) if test.seeded else 0
                            res = test.run(arr[sel, j], arr[sel, jb], h=steps, seed=s, params=params)
                        rows.append(dict(test=test.name, model=model, variable=var, horizon=h,
                                         subperiod=sname, score=score, n=res.n, stat=res.statistic,
                                         pvalue=res.pvalue, mean_diff=res.extra.get("mean_diff", np.nan),
                                         note=res.note))
    cols_out = ["test", "model", "variable", "horizon", "subperiod", "score", "n", "stat", "pvalue",
                "mean_diff", "note"]
    return pd.DataFrame(rows, columns=cols_out)


def set_tests(fc: pd.DataFrame, *, seed: int,
              settings: Mapping[str, Mapping[str, Any]] | None = None) -> pd.DataFrame:
    """Every set test (the model confidence set) per variable × horizon, full sample."""
    rows = []
    for test in comparison_tests("set"):
        params = test.settings((settings or {}).get(test.name))
        for score in _columns_for(test, fc, None):
            for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
                wide = g.pivot_table(index="origin", columns="model", values=score).dropna()
                if wide.shape[1] < 2:
                    continue
                steps = steps_ahead(h)
                small = too_small(test, wide.shape[0], steps, params)
                if small is not None:
                    continue
                s = cell_seed(seed, test.name, (var, h, score)) if test.seeded else 0
                labels = list(wide.columns)
                for m, r in zip(labels, test.run(wide, labels, h=steps, seed=s, params=params), strict=True):
                    rows.append(dict(test=test.name, score=score, variable=var, horizon=h, model=m,
                                     in_mcs=bool(r.extra.get("in_set")), pvalue=r.pvalue, n=r.n,
                                     alpha=r.extra.get("alpha", np.nan)))
    return pd.DataFrame(rows, columns=["test", "score", "variable", "horizon", "model", "in_mcs",
                                       "pvalue", "n", "alpha"])


def calibration_tests(fc: pd.DataFrame, *, seed: int,
                      settings: Mapping[str, Mapping[str, Any]] | None = None) -> pd.DataFrame:
    """Coverage and PIT tests per model × variable × horizon (wide: one row per cell).

    Columns: ``n`` (PIT values), per coverage column ``<col>_rate`` and ``<col>_<test>_p``, per
    PIT test ``<short>_p`` (``berkowitz_p``, ``rs_p``, ``rs_cvm_p``), and ``pit_hist`` (counts
    in ten bins, ';'-joined).
    """
    from harness.compare import pit_histogram

    cal = comparison_tests("calibration")
    rows = []
    for (model, var, h), g in fc.groupby(["model", "variable", "horizon"], sort=True):
        g = g.sort_values("origin")
        steps = steps_ahead(h)
        pit = g["pit"].to_numpy() if "pit" in g else np.zeros(0)
        pit = pit[np.isfinite(pit)]
        row: dict[str, Any] = dict(model=model, variable=var, horizon=h, n=len(pit))
        for c in g.columns:
            col = resolve(c)
            if col is None or col.score.orientation != "calibration":
                continue
            series = g[c].to_numpy(dtype=np.float64)
            finite = series[np.isfinite(series)]
            if col.nominal is not None:
                row[f"{c}_rate"] = finite.mean() if len(finite) else np.nan
            for test in cal:
                if test.name not in col.score.tests:
                    continue
                params = test.settings((settings or {}).get(test.name))
                res = too_small(test, len(finite), steps, params)
                if res is None:
                    s = cell_seed(seed, test.name, (model, var, h, c)) if test.seeded else 0
                    res = test.run(finite, h=steps, level=col.nominal, seed=s, params=params)
                key = f"{c}_{test.name}_p" if col.nominal is not None else _pit_key(test.name)
                row[key] = res.pvalue
                if "cvm_pvalue" in res.extra:
                    row["rs_cvm_p"] = res.extra["cvm_pvalue"]
        row["pit_hist"] = ";".join(str(int(x)) for x in pit_histogram(pit, bins=10))
        rows.append(row)
    return pd.DataFrame(rows)


def _pit_key(test: str) -> str:
    return {"rossi_sekhposyan": "rs_p"}.get(test, f"{test}_p")


def stability_tests(fc: pd.DataFrame, benchmark: str, *, seed: int,
                    settings: Mapping[str, Mapping[str, Any]] | None = None) -> pd.DataFrame:
    """Rolling comparisons (the fluctuation test) of each model against the benchmark, full sample."""
    rows = []
    for test in comparison_tests("stability"):
        params = test.settings((settings or {}).get(test.name))
        for score in _columns_for(test, fc, None):
            for (var, h), g in fc.groupby(["variable", "horizon"], sort=True):
                origins, tps, _, models, arrays = _panels(g, [score])
                if benchmark not in models or score not in arrays:
                    continue
                arr, jb = arrays[score], models.index(benchmark)
                steps = steps_ahead(h)
                for j, model in enumerate(models):
                    if model == benchmark:
                        continue
                    ok = np.isfinite(arr[:, j]) & np.isfinite(arr[:, jb])
                    if too_small(test, int(ok.sum()), steps, params) is not None:
                        continue
                    r = test.run(arr[ok, j], arr[ok, jb], h=steps, seed=0, params=params)
                    ends = tps[ok][np.asarray(r.extra["window_end"], dtype=int)]
                    for t, val in zip(ends, r.extra["path"], strict=True):
                        rows.append(dict(test=test.name, score=score, model=model, variable=var,
                                         horizon=h, target_period=t, stat=float(val),
                                         critical=float(r.extra["critical"]),
                                         reject=bool(r.extra["reject"])))
    return pd.DataFrame(rows)
